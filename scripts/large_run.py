"""The large run by hand (not in CI): invented logs of N units and M exposure rows, then the audit; time, memory, disk.

Writes the logs with `armlock.audit.synth_chunked.write_chunked` (Parquet, chunk by chunk) into a
folder, then runs `armlock audit` on them with the DuckDB engine under `--memory-limit`, each step
in a fresh child process, and prints a table: wall time, CPU time and peak resident memory of each
step (the child's own `ru_maxrss` from `os.wait4`; this parent imports only the standard library,
so what Linux carries over from it at fork is a few tens of MB), the files' size and the least free
disk space seen while the step ran (sampled every 2 s; the audit's spill folder is inside the run's
folder). The folder is deleted afterwards unless --keep. The data is invented.

Usage:
  nice -n 10 python scripts/large_run.py                       # 10 M units, 500 M rows (the default)
  python scripts/large_run.py --units 1000000 --rows 50000000  # a first, smaller run
  python scripts/large_run.py --dir runs/big --keep --memory-limit 8GB

Before it starts, it estimates the disk the logs need (about 10 bytes an exposure row and 18 a
unit, measured with zstd) and stops if less than --keep-free GB would be left. Figures: docs/engines.md,
"Large run".
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

BYTES_PER_ROW, BYTES_PER_UNIT = 10.0, 18.2  # measured on the writer's zstd output: 9.1-9.9 a row (ms-us), 18 a unit
SPEC_NAME, SALT, START = "large-run", "large-run-salt", "2026-01-05T00:00:00+00:00"


def _generate(directory: str, units: int, rows: int, seed: int, chunk_rows: int, time_unit: str) -> None:
    """The child: the spec file and the logs (heavy imports happen here, not in the parent)."""
    from datetime import datetime

    from armlock.assign import load_spec
    from armlock.assign.init import render_spec_toml
    from armlock.audit.synth_chunked import write_chunked

    spec_path = Path(directory) / "large-run.toml"
    spec_path.write_text(render_spec_toml(SPEC_NAME, [("holdout", 1000), ("exposed", 9000)], salt=SALT,
                                          start=datetime.fromisoformat(START),
                                          description="Invented data for the large run"), encoding="utf-8")
    logs = write_chunked(load_spec(spec_path), directory, units=units, exposure_rows=rows, seed=seed,
                         chunk_rows=chunk_rows, time_unit=time_unit)
    print(json.dumps(logs.truth))


def _size(path: Path) -> int:
    if path.is_file():
        return path.stat().st_size
    total = 0
    for root, _dirs, files in os.walk(path):
        for f in files:
            try:
                total += (Path(root) / f).stat().st_size
            except OSError:  # a spill file removed while we looked
                pass
    return total


def measured(cmd: list[str], folder: Path, log: Path) -> dict[str, float | int | str]:
    """Run `cmd` as a child; its wall time, CPU time, peak RSS (its own rusage), exit code and disk."""
    t0 = time.perf_counter()
    with open(log, "wb") as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=err)
    min_free, max_folder = shutil.disk_usage(folder).free, 0
    out, pause = bytearray(), 0.05
    os.set_blocking(proc.stdout.fileno(), False)  # type: ignore[union-attr]
    while True:
        pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
        chunk = proc.stdout.read()  # type: ignore[union-attr]
        if chunk:
            out += chunk
        min_free = min(min_free, shutil.disk_usage(folder).free)
        max_folder = max(max_folder, _size(folder))
        if pid:
            break
        time.sleep(pause)
        pause = min(2.0, pause * 2)  # short runs end soon after they finish; long ones are sampled every 2 s
    proc.returncode = os.waitstatus_to_exitcode(status)
    rest = proc.stdout.read()  # type: ignore[union-attr]
    out += rest or b""
    return {"wall_s": round(time.perf_counter() - t0, 1), "cpu_s": round(usage.ru_utime + usage.ru_stime, 1),
            "peak_rss_mb": round(usage.ru_maxrss / 1024), "exit": proc.returncode,
            "min_free_gb": round(min_free / 1e9, 1), "max_folder_gb": round(max_folder / 1e9, 2),
            "stdout": out.decode(errors="replace")[-2000:]}


def _commit() -> str:
    try:
        here = Path(__file__).resolve().parent
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, cwd=here,
                              check=True).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], capture_output=True,
                               text=True, cwd=here, check=True).stdout.strip()
        return head + (" with uncommitted changes" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", type=int, default=10_000_000)
    ap.add_argument("--rows", type=int, default=500_000_000, help="exposure rows")
    ap.add_argument("--dir", help="folder for the logs (default: a new temporary folder under the current one)")
    ap.add_argument("--keep", action="store_true", help="keep the logs and the report afterwards")
    ap.add_argument("--memory-limit", default="8GB", help="the audit's --memory-limit (DuckDB)")
    ap.add_argument("--chunk-rows", type=int, default=1_000_000, help="rows per chunk and Parquet row group")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--time-unit", choices=("ms", "us"), default="ms",
                    help="resolution of the exposure times (ms: 8%% of rows share a time at 500 M rows)")
    ap.add_argument("--keep-free", type=float, default=15.0, help="GB of disk that must stay free")
    ap.add_argument("--reuse", action="store_true", help="audit the logs already in --dir (no generation)")
    ap.add_argument("--results", help="also write the figures as JSON to this file")
    a = ap.parse_args(argv)

    folder = Path(a.dir) if a.dir else Path(tempfile.mkdtemp(prefix="large-run-", dir="."))
    folder.mkdir(parents=True, exist_ok=True)
    need = a.rows * BYTES_PER_ROW + a.units * BYTES_PER_UNIT
    free = shutil.disk_usage(folder).free
    if not a.reuse and free - need < a.keep_free * 1e9:
        print(f"Error: the logs need about {need / 1e9:.1f} GB and {free / 1e9:.1f} GB are free; "
              f"{a.keep_free:g} GB must stay free. Use fewer --rows or another --dir.", file=sys.stderr)
        return 4
    print(f"{a.units:,} units, {a.rows:,} exposure rows into {folder} (about {need / 1e9:.1f} GB; "
          f"{free / 1e9:.1f} GB free); commit {_commit()}; load average {os.getloadavg()[0]:.1f}", flush=True)
    steps: dict[str, dict[str, float | int | str]] = {}
    try:
        if not a.reuse:
            steps["generate"] = measured([sys.executable, __file__, "_generate", str(folder), str(a.units),
                                          str(a.rows), str(a.seed), str(a.chunk_rows), a.time_unit], folder,
                                         folder / "generate.log")
            print(f"generated: {steps['generate']}", flush=True)
            if steps["generate"]["exit"] != 0:
                print((folder / "generate.log").read_text(errors="replace")[-3000:], file=sys.stderr)
                return 1
        files = {n: folder / f"{n}.parquet" for n in ("visits", "exposures", "identities")}
        spill = folder / "spill"
        cmd = [sys.executable, "-m", "armlock", "audit", "--spec", str(folder / "large-run.toml"),
               "--visits", str(files["visits"]), "--exposures", str(files["exposures"]),
               "--identities", str(files["identities"]), "--engine", "duckdb", "--memory-limit", a.memory_limit,
               "--temp-dir", str(spill), "--format", "json", "--out", str(folder / "audit.json")]
        (folder / "audit.json").unlink(missing_ok=True)  # a report of an earlier run (--reuse) is not this one's
        load = os.getloadavg()[0]
        steps["audit"] = measured(cmd, folder, folder / "audit.log")
        steps["audit"]["load_before"] = round(load, 1)
        err_tail = (folder / "audit.log").read_text(errors="replace")[-3000:]
        verdict = "-"
        if (folder / "audit.json").exists():
            rep = json.loads((folder / "audit.json").read_text())
            verdict = rep.get("verdict", "-")
            checks = {c["id"]: c for c in rep.get("checks", [])}
            units = checks.get("srm", {}).get("figures", {}).get("units", {})
            steps["audit"]["units_counted"] = units.get("value", "-") if isinstance(units, dict) else units
        steps["audit"]["verdict"] = verdict
        sizes = {n: _size(p) for n, p in files.items() if p.exists()}
        print()
        print("| step | wall time | CPU time | peak RSS | exit | least free disk | largest folder |")
        print("|---|---:|---:|---:|---:|---:|---:|")
        for name, s in steps.items():
            print(f"| {name} | {s['wall_s']} s | {s['cpu_s']} s | {s['peak_rss_mb']:,} MB | {s['exit']} | "
                  f"{s['min_free_gb']} GB | {s['max_folder_gb']} GB |")
        print()
        print("files: " + ", ".join(f"{n} {b / 1e9:.2f} GB" for n, b in sizes.items())
              + f"; audit verdict {verdict}, exit {steps['audit']['exit']}, units counted "
              f"{steps['audit'].get('units_counted', '-')}")
        if steps["audit"]["exit"] not in (0, 1, 3):
            print("the audit's stderr ends with:\n" + err_tail, file=sys.stderr)
        if a.results:
            Path(a.results).write_text(json.dumps({"units": a.units, "rows": a.rows, "commit": _commit(),
                                                   "time_unit": a.time_unit,
                                                   "memory_limit": a.memory_limit, "files": sizes,
                                                   "steps": steps}, indent=1))
        return 0 if steps["audit"]["exit"] in (0, 1, 3) else 1
    finally:
        if not a.keep:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "_generate":
        _generate(sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]), int(sys.argv[6]), sys.argv[7])
    else:
        sys.exit(main())
