"""The malformed-input corpus run through `audit`, `assign`, `check` and `snippet`: no internal error,
no traceback, and no PASS on an input that is empty, ambiguous or does not match."""

from __future__ import annotations

import json
import shutil
from collections import Counter
from pathlib import Path

import pandas as pd
import pytest

from tests.cli.cli_run import run_cli

from .corpus import Case, _csv, spec_cases, text_cases
from .helpers import SPEC_TOML, write_demo_logs, write_spec
from .inprocess import Result, run_inprocess

ROLES = {"visits": ("unit_id", "first_seen", "pre_orders"), "exposures": ("unit_id", "event_time", None),
         "identities": ("unit_id", "linked_at", None)}
TALLY: Counter[str] = Counter()


@pytest.fixture(scope="module")
def base(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Path]]:
    folder = tmp_path_factory.mktemp("corpus")
    return folder, write_demo_logs(folder, units=300)


def _cases(paths: dict[str, Path], role: str) -> list[Case]:
    frame = pd.read_csv(paths[role], dtype=str, keep_default_na=False).head(300)
    id_col, time_col, num_col = ROLES[role]
    return list(text_cases(role, list(frame.columns), frame.to_numpy().tolist(), id_col, time_col, num_col))


def _sane(r: Result, what: str) -> None:
    TALLY[f"exit {r.returncode}"] += 1
    assert r.returncode != 5, f"{what}: internal error: {r.stderr}"
    assert "Traceback" not in r.stderr, f"{what}: {r.stderr}"
    if r.returncode in (2, 4, 6):  # an error says so on stderr, or (check --json) as JSON on stdout
        said = r.stderr.startswith(("Error:", "Usage:")) or "Error" in r.stderr or b'"valid": false' in r.stdout
        assert said, f"{what}: {r.stderr}"


@pytest.mark.parametrize("role", list(ROLES))
def test_audit_corpus(base: tuple[Path, dict[str, Path]], tmp_path: Path, role: str) -> None:
    folder, paths = base
    spec = write_spec(tmp_path)
    runs = 0
    for case in _cases(paths, role):
        bad = tmp_path / case.filename
        bad.write_bytes(case.data)
        files = {r: str(p) for r, p in paths.items()}
        files[role] = str(bad)
        r = run_inprocess(tmp_path, "audit", "--spec", spec.name, "--visits", files["visits"], "--exposures",
                          files["exposures"], "--identities", files["identities"], "--format", "json")
        what = f"audit, {role}: {case.name}"
        _sane(r, what)
        if r.returncode in (0, 1, 3):
            report = json.loads(r.stdout)
            if not case.judgeable:
                assert report["verdict"] != "pass", f"{what}: PASS on an input that cannot be judged"
                check = {"visits": "integrity", "exposures": "leakage", "identities": "churn"}[role]
                status = [c for c in report["checks"] if c["id"] == check][0]["status"]
                assert status in ("warn", "fail"), f"{what}: {check} is {status}"
        bad.unlink()
        runs += 1
    assert runs >= 40


def test_assign_corpus(base: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    folder, paths = base
    spec = write_spec(tmp_path)
    for case in _cases(paths, "visits"):
        bad = tmp_path / case.filename
        bad.write_bytes(case.data)
        for extra in ([], ["--column", "unit_id"], ["--out", "arms.csv"], ["--column", "unit_id", "--out", "a.parquet"],
                      ["--only", "holdout", "--ids-only"]):
            r = run_inprocess(tmp_path, "assign", "--spec", spec.name, case.filename, *extra)
            _sane(r, f"assign {' '.join(extra)}: {case.name}")
            if r.returncode != 0:
                assert r.stdout == b"", f"assign wrote output before failing: {case.name}"
                assert not (tmp_path / "arms.csv").exists() and not (tmp_path / "a.parquet").exists()
            (tmp_path / "arms.csv").unlink(missing_ok=True)
            (tmp_path / "a.parquet").unlink(missing_ok=True)
        r = run_inprocess(tmp_path, "assign", "--spec", spec.name, stdin=case.data)
        _sane(r, f"assign stdin: {case.name}")
        bad.unlink()
    leftovers = [p.name for p in tmp_path.iterdir() if ".tmp" in p.name]
    assert leftovers == []


def test_spec_corpus_check_snippet_and_lock(tmp_path: Path) -> None:
    for name, data in spec_cases(SPEC_TOML):
        folder = tmp_path / name.replace(" ", "-")
        folder.mkdir()
        (folder / "s.toml").write_bytes(data)
        for cmd in (["check"], ["check", "--json"], ["snippet"], ["assign"]):
            r = run_inprocess(folder, *cmd, "--spec", "s.toml", stdin=b"v1\n")
            _sane(r, f"{' '.join(cmd)}: spec {name}")
            assert r.returncode == 4, f"{cmd}: spec {name}: {r.stderr}"  # every case is an invalid spec
    for content in ("[]", "1", "null", '"x"', '{"fingerprint": "abc", "arms": [[1]]}', "{" * 10_000,
                    "[" * 100_000 + "]" * 100_000, '{"fingerprint": "abc", "changes": 3}'):
        folder = tmp_path / "lock"
        shutil.rmtree(folder, ignore_errors=True)
        folder.mkdir()
        write_spec(folder)
        (folder / "mistakes.toml.lock").write_text(content, encoding="utf-8")
        for cmd in (["check"], ["snippet"], ["assign"]):
            r = run_inprocess(folder, *cmd, "--spec", "mistakes.toml", stdin=b"v1\n")
            _sane(r, f"{cmd[0]}: lock {content[:20]}")
            assert r.returncode == 4


def test_init_out_to_a_directory(tmp_path: Path) -> None:
    (tmp_path / "d").mkdir()
    for extra in ([], ["--force"]):
        r = run_inprocess(tmp_path, "init", "x", "--out", "d", *extra)
        _sane(r, "init --out DIR")
        assert r.returncode == 4 and "is a folder" in r.stderr


def test_a_few_corpus_cases_in_a_real_process(base: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # the in-process runner is what makes hundreds of runs affordable; a real process must agree
    folder, paths = base
    spec = write_spec(tmp_path)
    picks = {c.name: c for c in _cases(paths, "exposures")}
    for name in ("gzip body damaged", "parquet page damaged", "header only"):
        case = picks[name]
        (tmp_path / case.filename).write_bytes(case.data)
        args = ["audit", "--spec", spec.name, "--visits", str(paths["visits"]), "--exposures", case.filename,
                "--format", "json"]
        real = run_cli(tmp_path, *args)
        mine = run_inprocess(tmp_path, *args)
        assert real.returncode == mine.returncode != 5, (name, real.stderr)
        assert "Traceback" not in real.stderr


# -- readout and plan (issue #20): zero exit 5, zero tracebacks, zero reassurances -----------------
def _orders_table(paths: dict[str, Path]) -> tuple[list[str], list[list[str]]]:
    v = pd.read_csv(paths["visits"], dtype=str, keep_default_na=False).head(150)
    rows = [[u, t, f"{10 + i % 50}.5"] for i, (u, t) in enumerate(zip(v["unit_id"], v["first_seen"]))]
    return ["unit_id", "order_time", "revenue"], rows


def test_readout_corpus(base: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    folder, paths = base
    spec = write_spec(tmp_path)
    header, rows = _orders_table(paths)
    cases = list(text_cases("orders", header, rows, "unit_id", "order_time", "revenue"))
    # the readout's own refusals and the broken exports of issue #20
    holdout_only = [r for r in rows if r[0].endswith(("0", "1", "2"))]
    cases += [Case("one id space shifted", "orders.csv", _csv(header, [["c-" + r[0], *r[1:]] for r in rows]), False),
              Case("true/false revenue", "orders.csv", _csv(header, [[*r[:2], "true"] for r in rows])),
              Case("revenue 1e308", "orders.csv", _csv(header, [[*r[:2], "1e308"] for r in rows])),
              Case("revenue -inf", "orders.csv", _csv(header, [[*r[:2], "-inf"] for r in rows]), False),
              Case("a few ids only", "orders.csv", _csv(header, holdout_only[:3]))]
    hits = 0
    for n, case in enumerate(cases):
        bad = tmp_path / case.filename
        bad.write_bytes(case.data)
        refusals = [["--spend", "inf"], ["--spend", "1000", "--as-of", "9999-12-31"]] if n % 10 == 0 else []
        for extra in ([], *refusals):
            r = run_inprocess(tmp_path, "readout", "--spec", spec.name, "--visits", str(paths["visits"]),
                              "--exposures", str(paths["exposures"]), "--orders", case.filename, "--format", "json",
                              *extra)
            what = f"readout {' '.join(extra)}: orders {case.name}"
            _sane(r, what)
            if extra:  # --spend inf and an as-of past 2261 are refused before anything is judged
                assert r.returncode in (2, 4), what
            if r.returncode in (0, 1, 3, 7):
                report = json.loads(r.stdout)
                if not case.judgeable:
                    assert report["trustworthy"] is False, f"{what}: trustworthy on a broken orders file"
                    hits += 1
        bad.unlink()
    assert hits >= 5  # the broken exports reached a verdict, and none was trustworthy


PLAN_VALUES = ["0", "-1", "1e-300", "1e300", "nan", "inf", "-inf", "abc", "", "1e308", "5%", "150%", "\x1b[2J"]


def test_plan_corpus(tmp_path: Path) -> None:
    base = {"--weekly-units": "20000", "--revenue-mean": "7", "--revenue-sd": "60", "--effect": "0.5"}
    for opt in [*base, "--margin", "--alpha", "--power", "--rho", "--weekly-spend", "--exposure-rate", "--lift",
                "--holdout-shares", "--weeks", "--max-weeks", "--target-iroas"]:
        for val in PLAN_VALUES:
            args = {**base, opt: val}
            if opt in ("--lift", "--target-iroas"):
                args.pop("--effect")
            if opt == "--target-iroas":
                args["--weekly-spend"] = "12000"
            flat = [x for kv in args.items() for x in kv]
            for fmt in (("text", "markdown") if val.startswith("\x1b") else ("markdown",)):
                r = run_inprocess(tmp_path, "plan", *flat, "--format", fmt)
                _sane(r, f"plan {opt} {val!r} --format {fmt}")
                assert "\x1b" not in r.stderr and b"\x1b" not in r.stdout


ARG_VALUES = ["\x1b[2J", "<img src=x onerror=1>", "", "-", "9999-12-31", "1e308", "nan", "inf", "-1", "a" * 5000,
              "logs", "%s%n"]


def test_hostile_arguments_to_every_command(base: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # a fuzz of the command line itself (issue #20): no exit 5, no traceback, no escape sequence out
    folder, paths = base
    spec = write_spec(tmp_path)
    v = pd.read_csv(paths["visits"], dtype=str).head(60)
    pd.DataFrame({"unit_id": v["unit_id"], "order_time": v["first_seen"], "revenue": 10.0}).to_csv(
        tmp_path / "orders.csv", index=False)
    vis = str(paths["visits"])
    commands = {
        "init": lambda h: ["init", h, "--out", "o.toml", "--force"],
        "check": lambda h: ["check", "--spec", h],
        "snippet": lambda h: ["snippet", "--spec", spec.name, "--out", h or "x"],
        "assign": lambda h: ["assign", "--spec", spec.name, h],
        "audit": lambda h: ["audit", "--spec", spec.name, "--visits", vis, "--as-of", h],
        "audit-history": lambda h: ["audit", "--spec", spec.name, "--visits", vis, "--history", h or "x", "--record"],
        "readout": lambda h: ["readout", "--spec", spec.name, "--visits", vis, "--orders", "orders.csv", "--spend", h],
        "readout-spend-file": lambda h: ["readout", "--spec", spec.name, "--visits", vis, "--orders", "orders.csv",
                                         "--spend-file", h or "x"],
        "history": lambda h: ["history", "--spec", spec.name, "--history", h or "x"],
        "overview": lambda h: ["overview", h or "."],
    }
    for name, make in commands.items():
        for h in ARG_VALUES:
            r = run_inprocess(tmp_path, *make(h), stdin=b"v1\n")
            _sane(r, f"{name} {h[:20]!r}")
            assert "\x1b" not in r.stderr, f"{name} {h[:20]!r}: {r.stderr!r}"
