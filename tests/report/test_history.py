"""The SQLite run history: upsert per as-of, ordering, concurrency, refusal of bad files, changes."""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from armlock.assign.errors import InputError
from armlock.shared import history
from armlock.shared.history import changes, default_history_path, load, record

from .fixtures import build_report


def test_default_path_is_beside_the_spec(tmp_path: Path) -> None:
    assert default_history_path(tmp_path / "trial.toml") == tmp_path / "trial.toml.history.sqlite"


def test_load_of_missing_file_is_empty(tmp_path: Path) -> None:
    assert load(tmp_path / "none.sqlite", "fp") == []
    assert not (tmp_path / "none.sqlite").exists()


def test_record_and_load_several_as_of_dates_in_order(tmp_path: Path, weekly_reports: list) -> None:
    path = tmp_path / "h.sqlite"
    for rep in reversed(weekly_reports):  # recorded out of order on purpose
        record(path, rep)
    rows = load(path, weekly_reports[0].fingerprint)
    assert [r["as_of"] for r in rows] == [r.as_of for r in weekly_reports]
    last = rows[-1]
    assert last["verdict"] == "fail"
    assert last["figures"]["leakage.share"] == {"label": "holdout leakage", "value": 0.014, "unit": "share"}
    assert last["checks"]["srm"] == {"title": "Sample ratio", "status": "fail"}
    assert last["recorded_at"].endswith("Z")


def test_rerun_for_same_as_of_replaces_the_row(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    record(path, build_report(as_of="2026-03-09", leak_share=0.002))
    record(path, build_report(as_of="2026-03-16", leak_share=0.003))
    record(path, build_report(as_of="2026-03-09", leak_share=0.02))
    rows = load(path, "fp-test-0001")
    assert [r["as_of"] for r in rows] == ["2026-03-09", "2026-03-16"]
    assert rows[0]["figures"]["leakage.share"]["value"] == 0.02
    with sqlite3.connect(path) as conn:
        assert conn.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 2


def test_specs_are_kept_apart_by_fingerprint(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    record(path, build_report(fingerprint="aaa"))
    record(path, build_report(fingerprint="bbb", leak_share=0.05))
    assert len(load(path, "aaa")) == 1
    assert load(path, "bbb")[0]["figures"]["leakage.share"]["value"] == 0.05
    assert load(path, "ccc") == []


_WORKER = textwrap.dedent("""
    import json, sys
    from datetime import date, timedelta
    from armlock.shared.history import record
    from armlock.audit.model import AuditReport
    base = json.loads(open(sys.argv[1], encoding="utf-8").read())
    proc = int(sys.argv[3])
    for j in range(10):
        base["as_of"] = (date(2026, 1, 1) + timedelta(days=proc * 10 + j)).isoformat()
        record(sys.argv[2], AuditReport.model_validate(base))
""")


def test_concurrent_processes_lose_no_rows(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    src = tmp_path / "report.json"
    src.write_text(json.dumps(build_report().to_json_dict()), encoding="utf-8")
    procs = [subprocess.Popen([sys.executable, "-c", _WORKER, str(src), str(path), str(i)],
                              stderr=subprocess.PIPE, text=True) for i in range(4)]
    errors = [p.communicate(timeout=120)[1] for p in procs]
    assert [p.returncode for p in procs] == [0, 0, 0, 0], errors
    rows = load(path, "fp-test-0001")
    assert len(rows) == 40
    assert len({r["as_of"] for r in rows}) == 40


def test_corrupt_file_is_refused_and_left_untouched(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    junk = b"this is not a database\x00\x01" * 200
    path.write_bytes(junk)
    with pytest.raises(InputError, match="not a readable armlock history") as err:
        record(path, build_report())
    assert str(path) in str(err.value)
    with pytest.raises(InputError, match="not a readable armlock history"):
        load(path, "fp-test-0001")
    assert path.read_bytes() == junk
    assert sorted(p.name for p in tmp_path.iterdir()) == ["h.sqlite"]


def test_damaged_history_keeps_its_bytes(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    record(path, build_report(as_of="2026-03-02"))
    raw = bytearray(path.read_bytes())
    raw[100:len(raw)] = b"\xff" * (len(raw) - 100)  # keep the SQLite header, wreck the pages
    path.write_bytes(bytes(raw))
    with pytest.raises(InputError, match=r"h\.sqlite"):
        record(path, build_report(as_of="2026-03-09"))
    assert path.read_bytes() == bytes(raw)


def test_another_programs_sqlite_file_is_not_written_into(tmp_path: Path) -> None:
    path = tmp_path / "other.sqlite"
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE recipes (name TEXT)")
    before = path.read_bytes()
    with pytest.raises(InputError, match="no meta table"):
        record(path, build_report())
    assert path.read_bytes() == before


def test_newer_schema_version_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    record(path, build_report())
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(history.SCHEMA_VERSION + 1),))
    for call in (lambda: record(path, build_report(as_of="2026-04-01")), lambda: load(path, "fp-test-0001")):
        with pytest.raises(InputError, match="schema version 2, newer than this armlock reads"):
            call()
    with sqlite3.connect(path) as conn:
        assert conn.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 1


def test_locked_file_gives_a_clear_error(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = tmp_path / "h.sqlite"
    record(path, build_report(as_of="2026-03-02"))
    monkeypatch.setattr(history, "BUSY_TIMEOUT_S", 0.2)
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("BEGIN EXCLUSIVE")
    try:
        with pytest.raises(InputError, match="is locked by another armlock run; retry"):
            record(path, build_report(as_of="2026-03-09"))
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert [r["as_of"] for r in load(path, "fp-test-0001")] == ["2026-03-02"]


def test_changes_say_what_moved_in_plain_words(weekly_reports: list) -> None:
    prev = history.row_from_report(weekly_reports[2])
    said = changes(prev, weekly_reports[3])
    assert "holdout leakage rose from 0.60% to 1.40%" in said
    assert "the verdict went from WARN to FAIL" in said
    assert "check “Sample ratio” went from PASS to FAIL" in said
    assert "SRM p-value fell from 0.3 to 0.0001" in said
    assert said.index("the verdict went from WARN to FAIL") == 0  # most important first


def test_changes_is_quiet_when_nothing_meaningful_moved() -> None:
    a = build_report(as_of="2026-03-09", leak_share=0.0020, srm_p=0.40)
    b = build_report(as_of="2026-03-16", leak_share=0.0021, srm_p=0.35)
    assert changes(history.row_from_report(a), b) == []
    assert changes(history.row_from_report(a), history.row_from_report(a)) == []


def test_changes_example_from_the_issue() -> None:
    a, b = build_report(leak_share=0.002), build_report(leak_share=0.014)
    assert "holdout leakage rose from 0.20% to 1.40%" in changes(history.row_from_report(a), b)


def test_changes_never_report_counts_that_merely_grew() -> None:
    a, b = build_report(as_of="2026-03-09", days=7), build_report(as_of="2026-03-16", days=28)
    prev = history.row_from_report(a)
    assert prev["figures"]["srm.units"]["value"] * 3 < history.row_from_report(b)["figures"]["srm.units"]["value"]
    assert changes(prev, b) == []


def test_changes_name_a_crossed_threshold() -> None:
    from armlock.assign.spec_audit import AuditThresholds

    def leak(share: float):  # the leakage figure under its real key, which has a threshold
        rep = build_report(leak_share=share)
        check = next(c for c in rep.checks if c.id == "leakage")
        check.figures = {"holdout_leak_share": check.figures["share"]}
        return rep

    th = AuditThresholds()  # leak_fail = 0.005
    a, b = leak(0.004), leak(0.0055)
    said = changes(history.row_from_report(a), b, th)
    assert said == ["holdout leakage rose from 0.40% to 0.55% and crossed the fail threshold "
                    "(0.50%; fail when above it)"]
    back = changes(history.row_from_report(b), a, th)
    assert back == ["holdout leakage fell from 0.55% to 0.40% and is back within the fail threshold "
                    "(0.50%; fail when above it)"]
    assert changes(history.row_from_report(a), leak(0.0045), th) == []  # no crossing, and under a fifth
    assert changes(history.row_from_report(a), b) == ["holdout leakage rose from 0.40% to 0.55%"]  # no thresholds


def test_record_into_a_missing_folder_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="does not exist"):
        record(tmp_path / "nowhere" / "h.sqlite", build_report())
    assert not (tmp_path / "nowhere").exists()


def test_figures_are_formatted_for_people() -> None:
    from armlock.shared.history import format_value

    assert format_value(0.014, "share") == "1.40%"
    assert format_value(0.002, "share") == "0.20%"
    assert format_value(0.00004, "share") == "<0.01%"
    assert format_value(12345, "count") == "12,345"
    assert format_value(0.00001234, "p") == "1.2e-05"
    assert format_value("2026-01-05T00:00:39.912000+00:00", "date") == "2026-01-05 00:00 UTC"
    assert format_value(None, "share") == "-"
