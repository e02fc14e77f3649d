"""CLI tests for `armlock audit`: run as a user would; exit codes and the exact messages for bad files."""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pytest

from tests.cli.cli_run import run_cli

from armlock.assign import arm_for, load_spec
from armlock.audit.synth import generate, write_logs

SPEC_TOML = '''format = 1
name = "cli-audit"
salt = "cli-audit-salt"
start = 2026-01-05T00:00:00Z

[[arms]]
name = "holdout"
weight = 5000
role = "holdout"

[[arms]]
name = "exposed"
weight = 5000
role = "exposed"

[audit]
segments = ["device"]
covariates = ["pre_orders"]
categorical_covariates = []
'''
HEADER = "unit_id,first_seen,arm,device,pre_orders"


def run(cwd: Path, *args: str) -> subprocess.CompletedProcess[str]:
    return run_cli(cwd, "audit", *args)


@pytest.fixture
def spec(tmp_path: Path) -> Path:
    p = tmp_path / "cli-audit.toml"
    p.write_text(SPEC_TOML, encoding="utf-8")
    return p


def _visits(tmp: Path, rows: list[str], name: str = "visits.csv", header: str = HEADER) -> Path:
    p = tmp / name
    p.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    return p


def _row(spec: Path, uid: str, ts: str = "2026-01-06T10:00:00Z", arm: str | None = None, device: str = "mobile") -> str:
    return f"{uid},{ts},{arm or arm_for(load_spec(spec), uid)},{device},0"


def _good_rows(spec: Path, n: int = 40) -> list[str]:
    return [_row(spec, f"u{i}", f"2026-01-{6 + i % 5:02d}T10:{i % 60:02d}:00Z", device=("mobile", "desktop")[i % 2])
            for i in range(n)]


def test_help_has_example_and_exit_codes(tmp_path: Path) -> None:
    r = run(tmp_path, "--help")
    assert r.returncode == 0
    assert "Example" in r.stdout and "3 FAIL" in r.stdout and "--strict" in r.stdout


def test_missing_visits_file(tmp_path: Path, spec: Path) -> None:
    r = run(tmp_path, "--spec", spec.name, "--visits", "nope.csv")
    assert r.returncode == 4
    assert r.stderr == "Error: nope.csv: visits file not found\n"


def test_unknown_extension(tmp_path: Path, spec: Path) -> None:
    (tmp_path / "visits.xlsx").write_text("x", encoding="utf-8")
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.xlsx")
    assert r.returncode == 4
    assert r.stderr == ("Error: visits.xlsx: cannot tell the format of the visits file from its name; "
                        "use .csv, .csv.gz or .parquet\n")


def test_missing_column_lists_existing_columns(tmp_path: Path, spec: Path) -> None:
    _visits(tmp_path, ["a,2026-01-06T10:00:00Z,holdout,mobile,0"], header="visitor,first_seen,arm,device,pre_orders")
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 4
    assert r.stderr == ("Error: visits.csv: column 'unit_id' not found in the visits file (spec: [audit.visits] "
                        "unit_id = \"unit_id\"); the file has columns: visitor, first_seen, arm, device, pre_orders\n")


def test_missing_exposure_column(tmp_path: Path, spec: Path) -> None:
    _visits(tmp_path, _good_rows(spec))
    (tmp_path / "exp.csv").write_text("unit_id,event_time,campaign\nu1,2026-01-07T00:00:00Z,c\n", encoding="utf-8")
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--exposures", "exp.csv")
    assert r.returncode == 4
    assert r.stderr == ("Error: exp.csv: column 'event_kind' not found in the exposures file (spec: "
                        "[audit.exposures] kind = \"event_kind\"); the file has columns: unit_id, event_time, campaign\n")


def test_unparseable_timestamps_name_first_lines(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec, 6)
    rows[1] = _row(spec, "x1", "yesterday")
    rows[3] = _row(spec, "x2", "06/01/2026 10:00")
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 4
    assert r.stderr == ("Error: visits.csv: column 'first_seen' has 2 time(s) that are not ISO 8601 (first: "
                        "lines 3, 5; e.g. 'yesterday'; '06/01/2026 10:00' looks like day/month/year or month/day/year: "
                        "set \"%d/%m/%Y %H:%M\" or \"%m/%d/%Y %H:%M\" (check which one your export writes) in "
                        "[audit.visits] first_seen_format)\n")


def test_non_numeric_covariate_names_rows(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec, 4)
    rows[2] = rows[2][:-1] + "many"
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 4
    assert r.stderr == ("Error: visits.csv: column 'pre_orders' has 1 value(s) that are not numbers "
                        "(first: line 4; e.g. 'many')\n")


def _json(r: subprocess.CompletedProcess[str]) -> dict:
    return json.loads(r.stdout)


def test_empty_ids_counted_and_na_is_an_id(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec)
    rows.insert(1, "," + _row(spec, "z")[2:])  # empty id on line 3
    rows.insert(4, _row(spec, "NA"))  # "NA" is an id, not a missing value
    rows.insert(5, "," + _row(spec, "z")[2:])  # line 7
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--format", "json")
    assert r.returncode == 0, r.stderr  # warn without --strict
    rep = _json(r)
    assert ("visits.csv: 2 row(s) with an empty or null 'unit_id' (lines 3, 7) were set aside: they have no arm"
            in rep["input_notes"])
    integ = {c["id"]: c for c in rep["checks"]}["integrity"]
    assert integ["status"] == "warn" and integ["figures"]["empty_ids"]["value"] == 2
    srm = {c["id"]: c for c in rep["checks"]}["srm"]
    assert srm["figures"]["units"]["value"] == 41  # 40 + "NA"
    assert integ["figures"]["mismatches"]["value"] == 0
    strict = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--strict")
    assert strict.returncode == 1


def test_duplicate_first_seen_keeps_earliest(tmp_path: Path, spec: Path) -> None:
    s = load_spec(spec)
    rows = _good_rows(spec)
    wrong = "holdout" if arm_for(s, "u3") == "exposed" else "exposed"
    rows.append(_row(spec, "u3", "2026-01-20T00:00:00Z", arm=wrong))  # later rows, recorded wrongly
    rows.append(_row(spec, "u3", "2026-01-21T00:00:00Z", arm=wrong))
    _visits(tmp_path, rows)
    # no --strict: 40 units are too few for the balance check to judge (a warn, exit 1 under --strict)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--format", "json")
    assert r.returncode == 0, r.stderr
    rep = _json(r)
    assert ("visits.csv: 1 unit id(s) had several first-seen rows (2 extra row(s)); the earliest row of each was kept"
            in rep["input_notes"])
    integ = {c["id"]: c for c in rep["checks"]}["integrity"]
    assert integ["figures"]["mismatches"]["value"] == 0  # the earliest row, with the right arm, was kept
    assert integ["figures"]["duplicate_rows"]["value"] == 2


def test_naive_timestamps_read_as_utc_and_noted(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec)
    rows[0] = _row(spec, "u0", "2026-01-05 23:30:00")
    rows[1] = _row(spec, "u1", "2026-01-05T23:00:00")
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--format", "json")
    rep = _json(r)
    assert "visits.csv: 2 time(s) in 'first_seen' have no zone; read as UTC" in rep["input_notes"]
    integ = {c["id"]: c for c in rep["checks"]}["integrity"]
    assert integ["figures"]["first_seen_min"]["value"] == "2026-01-05T23:00:00+00:00"


def test_unknown_arm_names_fail_integrity(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec)
    rows[5] = _row(spec, "c1", arm="control")
    rows[6] = _row(spec, "c2", arm="control")
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 3
    assert "2 units carry arm names the spec does not know: control (2)" in r.stdout
    assert "[FAIL] Assignment integrity" in r.stdout


def test_no_known_arm_at_all_is_bad_input(tmp_path: Path, spec: Path) -> None:
    _visits(tmp_path, [_row(spec, f"u{i}", arm=("control", "treatment")[i % 2]) for i in range(6)])
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 4
    assert r.stderr == ("Error: visits.csv: none of the arms recorded in column 'arm' is an arm of the spec "
                        "(found: control, treatment; the spec's arms: holdout, exposed); map the right column "
                        "in [audit.visits] arm, or check that this is the right test\n")


def test_bad_options_are_usage_errors(tmp_path: Path, spec: Path) -> None:
    _visits(tmp_path, _good_rows(spec))
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--format", "pdf")
    assert r.returncode == 2 and "unknown format 'pdf'" in r.stderr
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv", "--as-of", "last week")
    assert r.returncode == 2 and "'last week' is not a date; write YYYY-MM-DD" in r.stderr


@pytest.fixture(scope="module")
def synth_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("cli-synth")
    (d / "spec.toml").write_text(SPEC_TOML.replace(
        'segments = ["device"]\ncovariates = ["pre_orders"]\ncategorical_covariates = []\n', ""), encoding="utf-8")
    spec = load_spec(d / "spec.toml")
    write_logs(generate(spec, units=20_000, days=28, seed=5), d / "clean", "parquet")
    write_logs(generate(spec, units=20_000, days=28, seed=5, faults=("leakage",)), d / "leak", "csv")
    write_logs(generate(spec, units=20_000, days=28, seed=5, faults=("imbalance",)), d / "imb", "csv.gz")
    return d


@pytest.mark.parametrize("case,strict,code,verdict", [
    ("clean", False, 0, "PASS"), ("clean", True, 0, "PASS"),
    ("imb", False, 0, "WARN"), ("imb", True, 1, "WARN"),
    ("leak", False, 3, "FAIL"), ("leak", True, 3, "FAIL"),
])
def test_exit_codes_follow_the_verdict(synth_dir: Path, case: str, strict: bool, code: int, verdict: str) -> None:
    ext = {"clean": "parquet", "leak": "csv", "imb": "csv.gz"}[case]
    args = ["--spec", "spec.toml", "--visits", f"{case}/visits.{ext}", "--exposures", f"{case}/exposures.{ext}",
            "--identities", f"{case}/identities.{ext}"] + (["--strict"] if strict else [])
    r = run(synth_dir, *args)
    assert r.returncode == code, r.stderr
    assert f"verdict: {verdict}" in r.stdout


def test_out_file_in_json_and_markdown(synth_dir: Path, tmp_path: Path) -> None:
    out = tmp_path / "audit.json"
    r = run(synth_dir, "--spec", "spec.toml", "--visits", "clean/visits.parquet", "--format", "json", "--out", str(out))
    assert r.returncode == 0 and r.stdout == ""
    assert "Wrote the json report to" in r.stderr
    rep = json.loads(out.read_text(encoding="utf-8"))
    # leakage did not run (no exposure log): the verdict cannot be PASS and names it first (issue #20)
    assert rep["schema"] == "armlock.audit/1" and rep["verdict"] == "warn"
    assert {c["id"]: c["status"] for c in rep["checks"]}["leakage"] == "skipped"
    assert [m["id"] for m in rep["not_checked"] if m["gate"]] == ["leakage"]
    assert rep["verdict_text"].startswith("Could not check: Leakage (holdout reached by the vendor) (not run: no exposure log")
    md = run(synth_dir, "--spec", "spec.toml", "--visits", "clean/visits.parquet", "--format", "markdown")
    assert md.stdout.startswith("## armlock audit: cli-audit — **WARN** (could not check: Leakage")
    bad = run(synth_dir, "--spec", "spec.toml", "--visits", "clean/visits.parquet", "--out", str(tmp_path / "no" / "x.txt"))
    assert bad.returncode == 4 and bad.stderr.startswith("Error: ") and "cannot write the report" in bad.stderr


def test_ragged_and_empty_csv(tmp_path: Path, spec: Path) -> None:
    rows = _good_rows(spec, 3)
    rows[1] += ",extra"
    _visits(tmp_path, rows)
    r = run(tmp_path, "--spec", spec.name, "--visits", "visits.csv")
    assert r.returncode == 4
    assert r.stderr.startswith("Error: visits.csv: cannot read the visits file: CSV parse error: Expected 5 columns, got 6")
    _visits(tmp_path, [], name="header_only.csv")
    r = run(tmp_path, "--spec", spec.name, "--visits", "header_only.csv")
    assert r.returncode == 4
    assert r.stderr == "Error: header_only.csv: no usable rows in the visits file (it has no data rows)\n"
    (tmp_path / "zero.csv").write_text("", encoding="utf-8")
    r = run(tmp_path, "--spec", spec.name, "--visits", "zero.csv")
    assert r.returncode == 4 and r.stderr == "Error: zero.csv: the visits file is empty (no header line)\n"
