"""The DuckDB engine's speed as ratios, interleaved in fresh processes: audit vs a bare read, readout vs audit.

    python scripts/engine_ratios.py --units 2000000 --rounds 3 [--dir DIR] [--keep]

Writes invented logs (`audit.synth`, ten exposure rows per unit, about 0.7 orders per unit) to
Parquet, then runs each figure in a fresh Python process, round after round in turn (bare read,
audit on the native path, audit on the sliced reader, readout), so that a change in the machine's
load falls on all of them alike. Each child reports its wall time (interpreter start-up included)
its CPU time (user + system, every thread) and its peak resident memory (`VmHWM`). Prints each figure's median and the ratios of medians:
the audit against a bare read of the columns it needs (pyarrow, the spec's column map; the floor
any engine pays), the sliced reader against the native path, the readout against the audit.
Not a test: the benchmarks in tests/benchmarks/ are the suite's (pytest-benchmark); this is the
issue's 2,000,000-unit measurement by hand (docs/engines.md has the figures).
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

SPEC = {"name": "ratios", "salt": "ratios-salt", "start": "2026-01-05T00:00:00Z",
        "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}],
        "readout": {"orders": {"attributed": "attributed_channel"}}}

_PEAK = """
import json, sys, time
t0 = time.perf_counter()
def _cpu_s():
    import resource
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime
def _peak_mb():
    with open("/proc/self/status") as fh:
        return int(next(l for l in fh if l.startswith("VmHWM:")).split()[1]) // 1024
from armlock.assign import spec_from_dict
spec = spec_from_dict(json.loads(sys.argv[1]))
d = sys.argv[2]
"""
CHILDREN = {
    "bare read": _PEAK + """
import pyarrow.parquet as pq
a = spec.audit
cv, ce, ci = a.visits, a.exposures, a.identities
need = {"visits": [cv.unit_id, cv.first_seen, cv.arm, cv.browser, cv.fingerprint, *a.segments, *a.covariates,
                   *a.categorical_covariates],
        "exposures": [ce.unit_id, ce.time, ce.campaign, ce.kind], "identities": [ci.unit_id, ci.customer, ci.time]}
for name, cols in need.items():
    have = set(pq.read_schema(d + f"/{name}.parquet").names)
    pq.read_table(d + f"/{name}.parquet", columns=[c for c in dict.fromkeys(cols) if c in have])
print(json.dumps({"peak_mb": _peak_mb(), "cpu_s": _cpu_s()}))
""",
    "audit (native)": _PEAK + """
from armlock.audit.run import run_audit
from armlock.shared.engine_duckdb import DuckDBEngine
eng = DuckDBEngine()
rep = run_audit(spec, visits=d + "/visits.parquet", exposures=d + "/exposures.parquet",
                identities=d + "/identities.parquet", engine=eng)
assert eng.exposure_path == "native", eng.exposure_path
print(json.dumps({"peak_mb": _peak_mb(), "cpu_s": _cpu_s(), "verdict": rep.verdict}))
""",
    "audit (sliced reader)": _PEAK + """
from armlock.audit.run import run_audit
from armlock.shared.engine_duckdb import DuckDBEngine
rep = run_audit(spec, visits=d + "/visits.parquet", exposures=d + "/exposures.parquet",
                identities=d + "/identities.parquet", engine=DuckDBEngine(native=False))
print(json.dumps({"peak_mb": _peak_mb(), "cpu_s": _cpu_s(), "verdict": rep.verdict}))
""",
    "readout": _PEAK + """
from armlock.readout.run import run_readout
rep = run_readout(spec, visits=d + "/visits.parquet", exposures=d + "/exposures.parquet",
                  identities=d + "/identities.parquet", orders=d + "/orders.parquet", spend=100000.0)
print(json.dumps({"peak_mb": _peak_mb(), "cpu_s": _cpu_s(), "verdict": rep.status}))
""",
}


def write(units: int, d: Path) -> dict[str, object]:
    from armlock.assign import spec_from_dict
    from armlock.audit.synth import generate, generate_orders, write_logs, write_orders

    spec = spec_from_dict(SPEC)
    logs = generate(spec, units=units, seed=2, events_per_unit=10.0)
    orders = generate_orders(spec, logs, seed=3, base_rate=0.4, duplicates=0.001)
    write_logs(logs, d, "parquet")
    write_orders(orders, d, "parquet")
    return {**logs.truth, "order_rows": len(orders.orders)}


def run(name: str, d: Path) -> tuple[float, int, float]:
    import time

    t = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", CHILDREN[name], json.dumps(SPEC), str(d)], capture_output=True,
                       text=True, check=False, timeout=3600)
    wall = time.perf_counter() - t
    if r.returncode != 0:
        raise SystemExit(f"{name} failed:\n{r.stderr}")
    out = json.loads(r.stdout.strip().splitlines()[-1])
    return wall, int(out["peak_mb"]), float(out["cpu_s"])


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", type=int, default=2_000_000)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--dir", type=Path, default=None, help="reuse or keep the logs here")
    ap.add_argument("--only", nargs="*", default=list(CHILDREN), help="figures to run (default: all)")
    args = ap.parse_args()
    d = args.dir or Path(tempfile.mkdtemp(prefix="armlock-ratios-"))
    d.mkdir(parents=True, exist_ok=True)
    if not (d / "exposures.parquet").exists():
        print("sizes:", write(args.units, d), flush=True)
    times: dict[str, list[float]] = {n: [] for n in args.only}
    peaks: dict[str, list[int]] = {n: [] for n in args.only}
    cpus: dict[str, list[float]] = {n: [] for n in args.only}
    for i in range(args.rounds):
        for name in args.only:
            wall, peak, cpu = run(name, d)
            times[name].append(wall)
            peaks[name].append(peak)
            cpus[name].append(cpu)
            print(f"round {i + 1}: {name:<22} {wall:7.2f} s wall {cpu:7.2f} s CPU {peak:6,} MB  "
                  f"(load {os.getloadavg()[0]:.1f})", flush=True)
    med = {n: statistics.median(v) for n, v in times.items()}
    cmed = {n: statistics.median(v) for n, v in cpus.items()}
    print("\nmedians:")
    for n in args.only:
        print(f"  {n:<22} {med[n]:7.2f} s wall {cmed[n]:7.2f} s CPU  peak {statistics.median(peaks[n]):,.0f} MB")
    pairs = [("audit (native)", "bare read"), ("audit (sliced reader)", "bare read"),
             ("audit (sliced reader)", "audit (native)"), ("readout", "audit (native)")]
    print("ratios of medians:")
    for a, b in pairs:
        if a in med and b in med:
            print(f"  {a} / {b}: {med[a] / med[b]:.2f}x wall, {cmed[a] / cmed[b]:.2f}x CPU")
    return 0


if __name__ == "__main__":
    sys.exit(main())
