"""One test per common input mistake (issue 12's list): each gets a clear error, a fail or a loud note — never a PASS."""

from __future__ import annotations

import gzip
import hashlib
import json
from datetime import date
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from armlock.assign import InputError, arm_for, load_spec
from armlock.audit.render import check_by_id, render_text
from armlock.audit.run import run_audit

from .helpers import cli, write_demo_logs, write_spec


@pytest.fixture(scope="module")
def logs(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Path]]:
    folder = tmp_path_factory.mktemp("mistakes")
    return folder, write_demo_logs(folder)


def _spec(folder: Path, extra: str = "") -> object:
    return load_spec(write_spec(folder, extra))


# 1. ------------------------------------------------------------------------------------------
def test_1_assign_a_csv_without_column_is_refused_not_hashed_line_by_line(tmp_path: Path) -> None:
    # Mistake: `armlock assign --spec S visits.csv` forgetting --column: whole CSV lines (header
    # included) used to be hashed as ids.
    spec = write_spec(tmp_path)
    (tmp_path / "visits.csv").write_text("visitor_id,device\nv1,mobile\nv2,desktop\n", encoding="utf-8")
    r = cli(tmp_path, "assign", "--spec", spec.name, "visits.csv")
    assert r.returncode == 4 and r.stdout == b""
    assert r.stderr.decode() == ("Error: visits.csv: a CSV file with 2 columns; say which one holds the ids with "
                                 "--column; the columns are: 'visitor_id', 'device'\n")
    # one column: its header names it, and it is said; the header is not an id
    (tmp_path / "one.csv").write_text("visitor_id\nv1\nv2\n", encoding="utf-8")
    r = cli(tmp_path, "assign", "--spec", spec.name, "one.csv")
    assert r.returncode == 0
    assert r.stdout.decode().splitlines()[1:] == [f"v{i},{_bucket(spec, f'v{i}')},{arm_for(load_spec(spec), f'v{i}')}"
                                                   for i in (1, 2)]
    assert "one.csv: read as CSV with a header; ids from its one column 'visitor_id'" in r.stderr.decode()


def _bucket(spec: Path, uid: str) -> int:
    from armlock.assign import bucket

    return bucket(load_spec(spec).salt, uid)


# 2. ------------------------------------------------------------------------------------------
def test_2_a_byte_order_mark_is_never_part_of_an_id_a_header_or_the_spec(tmp_path: Path) -> None:
    # Mistake: a file saved by a spreadsheet on one platform starts with a UTF-8 BOM.
    spec = write_spec(tmp_path)
    expected = arm_for(load_spec(spec), "visitor-1")
    r = cli(tmp_path, "assign", "--spec", spec.name, stdin=b"\xef\xbb\xbfvisitor-1\n")
    assert r.returncode == 0
    assert r.stdout.decode().splitlines()[1].split(",")[::2] == ["visitor-1", expected]
    assert "a leading UTF-8 byte-order mark was removed (it is not part of any id)" in r.stderr.decode()
    (tmp_path / "ids.csv").write_bytes(b"\xef\xbb\xbfvisitor_id,x\nvisitor-1,1\n")
    r = cli(tmp_path, "assign", "--spec", spec.name, "ids.csv", "--column", "visitor_id")
    assert r.returncode == 0 and r.stdout.decode().splitlines()[1].endswith("," + expected)
    spec.write_bytes(b"\xef\xbb\xbf" + spec.read_bytes())
    r = cli(tmp_path, "check", "--spec", spec.name)
    assert r.returncode == 0
    assert "a leading UTF-8 byte-order mark was removed (it is not part of the spec)" in r.stderr.decode()


def test_2_audit_notes_a_bom_in_a_csv_header(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    folder, paths = logs
    bom = tmp_path / "visits.csv"
    bom.write_bytes(b"\xef\xbb\xbf" + paths["visits"].read_bytes())
    rep = run_audit(_spec(tmp_path), visits=bom)
    assert "visits.csv: a leading UTF-8 byte-order mark was removed (it is not data)" in rep.input_notes
    assert rep.checks[0].figures  # read normally


# 3. ------------------------------------------------------------------------------------------
def test_3_an_empty_exposure_log_cannot_pass(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: the vendor's export came back header-only (or with every id blank).
    folder, paths = logs
    spec = _spec(tmp_path)
    header = paths["exposures"].read_text(encoding="utf-8").splitlines()[0]
    (tmp_path / "empty.csv").write_text(header + "\n", encoding="utf-8")
    blank = pd.read_csv(paths["exposures"], dtype=str).assign(unit_id="")
    blank.to_csv(tmp_path / "blank.csv", index=False)
    for name, why in (("empty.csv", "the file has no data rows"), ("blank.csv", "none of its")):
        leak = check_by_id(run_audit(spec, visits=paths["visits"], exposures=tmp_path / name), "leakage")
        assert leak.status == "warn", name
        assert leak.summary.startswith("Cannot judge: the exposure log has no usable rows (" + why)


@pytest.mark.parametrize("mangle, cause", [
    (lambda s: "dsp_" + s, "the vendor's ids carry the prefix 'dsp_' (without it,"),
    (lambda s: hashlib.sha256(s.encode()).hexdigest(), "look like hex hashes (MD5, SHA-1 or SHA-256)"),
    (lambda s: "x" + s[::-1], "the log holds another id than the one the snippet sets"),
])
def test_3_an_exposure_log_with_other_ids_fails_naming_the_cause(logs: tuple[Path, dict[str, Path]], tmp_path: Path,
                                                                mangle: object, cause: str) -> None:
    # Mistake: the vendor exports its own id, a prefixed id or a hashed one: nothing matches.
    folder, paths = logs
    e = pd.read_csv(paths["exposures"], dtype=str, keep_default_na=False)
    e["unit_id"] = e["unit_id"].map(mangle)  # type: ignore[arg-type]
    e.to_csv(tmp_path / "exposures.csv", index=False)
    rep = run_audit(_spec(tmp_path), visits=paths["visits"], exposures=tmp_path / "exposures.csv")
    leak = check_by_id(rep, "leakage")
    assert leak.status == "fail" and rep.verdict == "fail"
    assert leak.summary.startswith("The exposure log does not match the visits: only 0.0% of its ")
    assert cause in leak.summary
    assert leak.figures["id_match_rate"].value == 0.0


# 4. ------------------------------------------------------------------------------------------
def test_4_duplicated_column_names_are_ambiguous(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: a join in the export left two `arm` columns (CSV) or two `unit_id` columns (Parquet).
    folder, paths = logs
    lines = paths["visits"].read_text(encoding="utf-8").splitlines()
    (tmp_path / "v.csv").write_text("\n".join(line + ("," + "arm" if i == 0 else ",holdout") for i, line in enumerate(lines)),
                                    encoding="utf-8")
    with pytest.raises(InputError) as exc:
        run_audit(_spec(tmp_path), visits=tmp_path / "v.csv")
    assert "column 'arm' ([audit.visits] arm) appears 2 times in the visits file (columns 3, 11)" in str(exc.value)
    t = pq.read_table(write_demo_logs(tmp_path / "pq", fmt="parquet")["visits"])
    t = pa.Table.from_arrays([*t.columns, t.column("unit_id")], names=[*t.column_names, "unit_id"])
    pq.write_table(t, tmp_path / "v.parquet")
    with pytest.raises(InputError, match=r"column 'unit_id' \(\[audit.visits\] unit_id\) appears 2 times"):
        run_audit(_spec(tmp_path), visits=tmp_path / "v.parquet")


# 5. ------------------------------------------------------------------------------------------
def test_5_as_of_cuts_the_identity_links(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake (ours): churn as of week 1 used links made in week 4.
    folder, paths = logs
    spec = _spec(tmp_path)
    ident = pd.read_csv(paths["identities"], dtype=str)
    early = run_audit(spec, visits=paths["visits"], identities=paths["identities"], as_of=date(2026, 1, 11))
    late = run_audit(spec, visits=paths["visits"], identities=paths["identities"], as_of=date(2026, 2, 1))
    n_early = check_by_id(early, "churn").figures["customers"].value
    n_late = check_by_id(late, "churn").figures["customers"].value
    made = pd.to_datetime(ident["linked_at"], utc=True)
    assert n_early == ident.loc[made < pd.Timestamp("2026-01-12", tz="UTC"), "customer_key"].nunique()
    assert 0 < n_early < n_late
    assert any("identity link(s) made after the as-of date 2026-01-11 are ignored" in n for n in early.input_notes)
    # without a time column: only links of units first seen by then, and the report says so
    ident.drop(columns="linked_at").to_csv(tmp_path / "links.csv", index=False)
    rep = run_audit(spec, visits=paths["visits"], identities=tmp_path / "links.csv", as_of=date(2026, 1, 11))
    assert any(n.startswith("links.csv: no 'linked_at' column ([audit.identities] time), so churn as of 2026-01-11 "
                            "uses only links of units first seen by then") for n in rep.input_notes)
    assert check_by_id(rep, "churn").figures["customers"].value == n_early


# 6. ------------------------------------------------------------------------------------------
def test_6_a_log_exported_ten_times_is_counted_once(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: the same export appended ten times (a retried upload job).
    folder, paths = logs
    spec = _spec(tmp_path)
    once = check_by_id(run_audit(spec, visits=paths["visits"], exposures=paths["exposures"]), "leakage")
    text = paths["exposures"].read_text(encoding="utf-8").splitlines()
    (tmp_path / "e10.csv").write_text("\n".join([text[0], *text[1:] * 10]) + "\n", encoding="utf-8")
    rep = run_audit(spec, visits=paths["visits"], exposures=tmp_path / "e10.csv")
    ten = check_by_id(rep, "leakage")
    rows = len(text) - 1
    assert ten.figures["duplicate_rows"].value == 9 * rows + once.figures["duplicate_rows"].value
    for key in ("holdout_impressions", "holdout_leak_units", "exposure_rate_exposed", "holdout_clicks"):
        assert ten.figures[key].value == once.figures[key].value, key
    assert any("exposure row(s) repeat another row exactly" in n for n in rep.input_notes)


# 7. ------------------------------------------------------------------------------------------
def test_7_an_as_of_after_the_data_is_said(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: auditing "as of today" on logs that stopped arriving two weeks ago.
    folder, paths = logs
    spec = write_spec(tmp_path)
    rep = run_audit(load_spec(spec), visits=paths["visits"], as_of=date(2026, 3, 1))
    assert rep.data_through == "2026-02-01"
    assert "the as-of date 2026-03-01 is 28 day(s) after the last first-seen day in the visits (2026-02-01): " \
           "the report covers data through 2026-02-01 only" in rep.input_notes
    assert render_text(rep).startswith("armlock audit: mistakes   as of 2026-03-01 (data through 2026-02-01 only)")
    r = cli(tmp_path, "audit", "--spec", spec.name, "--visits", str(paths["visits"]), "--as-of", "2026-03-01",
            "--record", "--format", "json")
    # 28 days without a new visitor is a stale feed: the audit fails on it (exit 7, stale data; issue #20)
    assert r.returncode == 7, r.stderr
    assert "Recorded under 2026-03-01, but the visits end on 2026-02-01" in r.stderr.decode()
    fresh = next(c for c in rep.checks if c.id == "freshness")
    assert fresh.status == "fail" and fresh.summary.startswith("The visits feed ends on 2026-02-01, 28 day(s) before")


# 8. ------------------------------------------------------------------------------------------
def test_8_audit_records_the_lock_and_fails_after_a_confirmed_change(logs: tuple[Path, dict[str, Path]],
                                                                   tmp_path: Path) -> None:
    # Mistake: the salt of a running test is "rotated"; the audit must not go on as if nothing happened.
    folder, paths = logs
    spec = write_spec(tmp_path)
    r = cli(tmp_path, "audit", "--spec", spec.name, "--visits", str(paths["visits"]), "--format", "json")
    assert r.returncode in (0, 3) and (tmp_path / "mistakes.toml.lock").is_file()  # audit records the lock
    spec.write_text(spec.read_text(encoding="utf-8").replace("mistakes-salt", "rotated-salt"), encoding="utf-8")
    r = cli(tmp_path, "audit", "--spec", spec.name, "--visits", str(paths["visits"]))
    assert r.returncode == 6 and r.stdout == b""
    assert "THE SPLIT HAS CHANGED. the salt changed" in r.stderr.decode()
    r = cli(tmp_path, "audit", "--spec", spec.name, "--visits", str(paths["visits"]), "--format", "json",
            "--accept-changed-split")
    assert r.returncode == 3
    integ = [c for c in json.loads(r.stdout)["checks"] if c["id"] == "integrity"][0]
    assert integ["status"] == "fail" and "after the test started (the salt changed; fingerprint" in integ["summary"]


@pytest.mark.parametrize("content", ["[]", "1", '{"fingerprint": "x", "arms": [[1]]}', "[" * 100_000 + "]" * 100_000,
                                     '{"fingerprint": 7}', "\x00\x01"])
def test_8_a_lock_file_of_the_wrong_shape_is_bad_input(tmp_path: Path, content: str) -> None:
    spec = write_spec(tmp_path)
    (tmp_path / "mistakes.toml.lock").write_text(content, encoding="utf-8")
    for cmd in ("check", "snippet"):
        r = cli(tmp_path, cmd, "--spec", spec.name)
        assert r.returncode == 4, r.stderr
        assert r.stderr.decode().startswith("Error: mistakes.toml.lock: the lock file ")
        assert "restore it from version control, or delete it to record the current split" in r.stderr.decode()


# 9. ------------------------------------------------------------------------------------------
def test_9_epoch_and_day_first_times_say_what_they_look_like_and_which_setting_reads_them(
        logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: the vendor exports epoch seconds (or milliseconds, or day/month/year) times.
    folder, paths = logs
    e = pd.read_csv(paths["exposures"], dtype=str, keep_default_na=False)
    t = pd.to_datetime(e["event_time"], utc=True, format="ISO8601")
    epoch = pd.Timestamp("1970-01-01", tz="UTC")
    spec = _spec(tmp_path)
    base = check_by_id(run_audit(spec, visits=paths["visits"], exposures=paths["exposures"]), "leakage")
    forms = {
        "epoch_seconds": ((t - epoch) // pd.Timedelta(seconds=1)).astype(str),
        "epoch_milliseconds": ((t - epoch) // pd.Timedelta(milliseconds=1)).astype(str),
        "%d/%m/%Y %H:%M:%S.%f": t.dt.strftime("%d/%m/%Y %H:%M:%S.%f"),
    }
    said = {"epoch_seconds": "looks like epoch seconds: set \"epoch_seconds\" in [audit.exposures] time_format",
            "epoch_milliseconds": "looks like epoch milliseconds: set \"epoch_milliseconds\" in [audit.exposures] "
                                  "time_format",
            "%d/%m/%Y %H:%M:%S.%f": "looks like day/month/year"}
    for fmt, values in forms.items():
        e.assign(event_time=values).to_csv(tmp_path / "e.csv", index=False)
        with pytest.raises(InputError) as exc:
            run_audit(spec, visits=paths["visits"], exposures=tmp_path / "e.csv")
        assert "column 'event_time' has" in str(exc.value) and said[fmt] in str(exc.value), str(exc.value)
        fixed = _spec(tmp_path, f'\n[audit.exposures]\ntime_format = "{fmt}"\n')
        leak = check_by_id(run_audit(fixed, visits=paths["visits"], exposures=tmp_path / "e.csv"), "leakage")
        same = ("exposure_rate_exposed", "holdout_leak_units") if fmt != "epoch_seconds" else ("exposure_rate_exposed",)
        for key in same:
            assert leak.figures[key].value == pytest.approx(base.figures[key].value, abs=0.01), (fmt, key)


def test_9_a_semicolon_csv_says_which_delimiter_reads_it(logs: tuple[Path, dict[str, Path]], tmp_path: Path) -> None:
    # Mistake: a spreadsheet in a comma-decimal locale saves "CSV" with semicolons.
    folder, paths = logs
    v = pd.read_csv(paths["visits"], dtype=str, keep_default_na=False)
    v.to_csv(tmp_path / "v.csv", index=False, sep=";")
    with pytest.raises(InputError) as exc:
        run_audit(_spec(tmp_path), visits=tmp_path / "v.csv")
    assert str(exc.value).endswith('the header looks ;-separated (semicolon): set delimiter = ";" in [audit.visits]')
    ok = run_audit(_spec(tmp_path, '\n[audit.visits]\ndelimiter = ";"\n'), visits=tmp_path / "v.csv")
    assert check_by_id(ok, "integrity").figures["units"].value == len(v)
    gz = tmp_path / "v.csv.gz"
    gz.write_bytes(gzip.compress((tmp_path / "v.csv").read_bytes()))
    assert run_audit(_spec(tmp_path, '\n[audit.visits]\ndelimiter = ";"\n'), visits=gz).verdict == ok.verdict


# issue 14, item 8 ---------------------------------------------------------------------------
def test_the_holdout_list_for_a_vendor_exclusion_upload(tmp_path: Path) -> None:
    # Mistake avoided: uploading the whole visitor list (or the exposed arm) as the exclusion list.
    spec = write_spec(tmp_path)
    s = load_spec(spec)
    ids = [f"visitor-{i}" for i in range(400)] + ["", "line\nbreak"]
    pd.DataFrame({"visitor_id": ids, "x": 1}).to_csv(tmp_path / "visits.csv", index=False)
    r = cli(tmp_path, "assign", "--spec", spec.name, "visits.csv", "--column", "visitor_id", "--only", "holdout",
            "--ids-only", "--out", "holdout.txt")
    assert r.returncode == 0, r.stderr
    held = (tmp_path / "holdout.txt").read_text(encoding="utf-8").splitlines()
    assert held == [i for i in ids if i and "\n" not in i and arm_for(s, i) == "holdout"]
    assert 40 < len(held) < 120  # a 20% arm of 400
    err = r.stderr.decode()
    broken = int(arm_for(s, "line\nbreak") == "holdout")
    assert err.startswith(f"Kept {len(held) + broken:,} of {len(ids):,} ids (arms holdout) in holdout.txt")
    assert ("1 id(s) contain a line break" in err) == bool(broken)
    # by arm name, full CSV rows
    r = cli(tmp_path, "assign", "--spec", spec.name, "visits.csv", "--column", "visitor_id", "--only", "exposed")
    rows = r.stdout.decode().splitlines()
    assert rows[0] == "unit_id,bucket,arm" and all(row.endswith(",exposed") for row in rows[1:] if "," in row)
    r = cli(tmp_path, "assign", "--spec", spec.name, "visits.csv", "--column", "visitor_id", "--only", "control")
    assert r.returncode == 2 and b"'control' is neither an arm of the spec (holdout, exposed) nor a role" in r.stderr
