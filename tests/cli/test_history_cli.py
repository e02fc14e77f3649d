"""CLI tests for `armlock history`: the trend table, changes since the previous run, bad files."""

from __future__ import annotations

import json
from datetime import timedelta
from pathlib import Path

import pytest

from tests.cli.cli_run import run_cli

from armlock.assign import load_spec
from armlock.shared.history import record
from tests.report.fixtures import weekly


run = run_cli


@pytest.fixture
def spec(tmp_path: Path) -> Path:
    r = run(tmp_path, "init", "homeware-test", "--holdout-share", "0.1")
    assert r.returncode == 0, r.stderr
    return tmp_path / "homeware-test.toml"


def _record_weeks(spec: Path, path: Path, n: int = 4) -> None:
    fp = load_spec(spec).fingerprint
    for rep in weekly(n):
        rep.fingerprint = fp
        record(path, rep)


def test_history_help_has_an_example(tmp_path: Path) -> None:
    r = run(tmp_path, "history", "--help")
    assert r.returncode == 0 and "Example" in r.stdout and "--history" in r.stdout


def test_history_without_runs_says_how_to_record(spec: Path, tmp_path: Path) -> None:
    r = run(tmp_path, "history", "--spec", spec.name)
    assert r.returncode == 0
    assert r.stderr == ("No audit runs recorded for 'homeware-test': homeware-test.toml.history.sqlite "
                        "does not exist yet. Record one with `armlock audit --spec ... --record`.\n")
    assert not (tmp_path / "homeware-test.toml.history.sqlite").exists()


def test_history_table_and_changes(spec: Path, tmp_path: Path) -> None:
    _record_weeks(spec, tmp_path / "homeware-test.toml.history.sqlite")
    r = run(tmp_path, "history", "--spec", spec.name)
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert lines[0].startswith("Audit history of 'homeware-test'") and "4 run(s)" in lines[0]
    table = [ln for ln in lines if ln[:4] == "2026"]
    assert [ln.split()[:2] for ln in table] == [["2026-03-02", "WARN"], ["2026-03-09", "WARN"],
                                                ["2026-03-16", "WARN"], ["2026-03-23", "FAIL"]]
    rule = next(i for i, ln in enumerate(lines) if ln.startswith("-----"))
    # failing checks' headline figures come first: SRM p, then leakage (both fail in the last run);
    # long labels wrap over header lines, never cut ("customers in" / "several arms")
    header = [h.strip() for h in lines[rule - 1].split("  ") if h.strip()]
    assert header[:5] == ["as of", "verdict", "SRM p-value", "holdout leakage", "several arms"]
    assert lines[rule - 2].strip() == "customers in" and "…" not in r.stdout
    assert table[-1].split()[2:4] == ["0.0001", "1.40%"]
    # the last column says why each week is not PASS: failing checks' ids, else the warning ones
    assert "failing checks" in lines[rule - 1]
    assert table[-1].endswith("srm, leakage") and table[0].split("  ")[-1].startswith("warn: ")
    assert "Since 2026-03-16 (as of 2026-03-23):" in lines
    assert "  - Holdout leakage rose from 0.60% to 1.40%" in lines
    assert "  - The verdict went from WARN to FAIL" in lines


def test_history_json_and_custom_path(spec: Path, tmp_path: Path) -> None:
    path = tmp_path / "elsewhere.sqlite"
    _record_weeks(spec, path, 2)
    r = run(tmp_path, "history", "--spec", spec.name, "--history", path.name, "--format", "json")
    assert r.returncode == 0, r.stderr
    doc = json.loads(r.stdout)
    assert [x["as_of"] for x in doc["runs"]] == ["2026-03-02", "2026-03-09"]
    assert doc["fingerprint"] == load_spec(spec).fingerprint
    # leakage 0.2% -> 0.2% and SRM p 0.6 -> 0.5 are not worth a sentence, and neither are units
    # doubling from 14,000 to 28,000: counts always grow
    assert doc["changes_since_previous"] == []


def test_history_corrupt_file_is_a_clear_error(spec: Path, tmp_path: Path) -> None:
    path = tmp_path / "homeware-test.toml.history.sqlite"
    path.write_bytes(b"not sqlite at all")
    r = run(tmp_path, "history", "--spec", spec.name)
    assert r.returncode == 4
    assert r.stderr.startswith("Error: history file homeware-test.toml.history.sqlite is not a readable "
                               "armlock history (not an SQLite database); it was left untouched.")
    assert "Traceback" not in r.stderr
    assert path.read_bytes() == b"not sqlite at all"


def test_history_unknown_format_is_usage_error(spec: Path, tmp_path: Path) -> None:
    r = run(tmp_path, "history", "--spec", spec.name, "--format", "xml")
    assert r.returncode == 2 and "unknown format 'xml'" in r.stderr


def _logs(tmp_path: Path, spec: Path) -> dict[str, Path]:
    from armlock.audit import synth

    logs = synth.generate(load_spec(spec), units=4_000, days=21, seed=5, faults=("leakage",))
    return synth.write_logs(logs, tmp_path / "logs", fmt="parquet")


def test_audit_record_then_history_and_html(spec: Path, tmp_path: Path) -> None:
    logs = _logs(tmp_path, spec)
    base = ["audit", "--spec", spec.name, "--visits", str(logs["visits"].relative_to(tmp_path)),
            "--exposures", str(logs["exposures"].relative_to(tmp_path))]
    start = load_spec(spec).start.date()
    days = [(start + timedelta(days=d)).isoformat() for d in (6, 13, 13, 20)]  # one date twice
    for day in days:
        r = run(tmp_path, *base, "--as-of", day, "--record", "--format", "json")
        assert r.returncode in (0, 1, 3), r.stderr
    h = run(tmp_path, "history", "--spec", spec.name, "--format", "json")
    doc = json.loads(h.stdout)
    assert [x["as_of"] for x in doc["runs"]] == sorted(set(days))  # the rerun replaced its row
    r = run(tmp_path, *base, "--as-of", days[-1], "--format", "html", "--out", "report.html")
    assert r.returncode in (0, 1, 3), r.stderr
    page = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and 'data-chart="history"' in page
    assert f"Compared with the run as of {days[1]} (3 runs recorded)" in page
    # an explicit --history path is used for both writing and reading
    r = run(tmp_path, *base, "--as-of", days[0], "--record", "--history", "other.sqlite")
    assert (tmp_path / "other.sqlite").is_file()
    h = run(tmp_path, "history", "--spec", spec.name, "--history", "other.sqlite", "--format", "json")
    assert [x["as_of"] for x in json.loads(h.stdout)["runs"]] == [days[0]]


def test_audit_record_into_corrupt_history_is_refused(spec: Path, tmp_path: Path) -> None:
    logs = _logs(tmp_path, spec)
    bad = tmp_path / "homeware-test.toml.history.sqlite"
    bad.write_bytes(b"garbage" * 10)
    r = run(tmp_path, "audit", "--spec", spec.name, "--visits", str(logs["visits"]), "--record")
    assert r.returncode == 4
    assert "Error: history file homeware-test.toml.history.sqlite is not a readable armlock history" in r.stderr
    assert bad.read_bytes() == b"garbage" * 10
