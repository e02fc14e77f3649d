"""The smaller quirks of issue #20: assign's stdin / .txt / --ids-only Parquet / lone CR, and a
minimal visits file whose missing columns are all named at once."""

from __future__ import annotations

from pathlib import Path

import pytest

from .helpers import write_spec
from .inprocess import run_inprocess


@pytest.mark.parametrize("name, stdin, said", [
    ("two-column CSV on stdin", b"unit_id,other\nv1,a\nv2,b\n",
     "stdin: every line holds 2 fields separated by commas: this is a table, not one id per line; pass --column"),
    ("a header line", b"unit_id\nv1\nv2\n", "stdin: line 1 is 'unit_id', a column name, not an id: pass --column unit_id"),
    ("ids ended by a lone CR", b"v1\rv2\n", "stdin: line 1 holds a carriage return inside it"),
])
def test_assign_refuses_what_is_not_one_id_per_line(tmp_path: Path, name: str, stdin: bytes, said: str) -> None:
    spec = write_spec(tmp_path)
    r = run_inprocess(tmp_path, "assign", "--spec", spec.name, stdin=stdin)
    assert r.returncode == 4 and r.stdout == b"" and r.stderr.startswith(f"Error: {said}"), (name, r.stderr)


def test_assign_keeps_crlf_and_a_single_id_with_a_comma(tmp_path: Path) -> None:
    spec = write_spec(tmp_path)
    r = run_inprocess(tmp_path, "assign", "--spec", spec.name, stdin=b"v1\r\nv2\r\n")
    assert r.returncode == 0 and r.stdout.decode().splitlines()[1].startswith("v1,")
    one = run_inprocess(tmp_path, "assign", "--spec", spec.name, stdin=b"a,b\n")
    assert one.returncode == 0 and '"a,b"' in one.stdout.decode()


def test_a_txt_header_is_not_hashed_as_an_id(tmp_path: Path) -> None:
    spec = write_spec(tmp_path)
    (tmp_path / "ids.txt").write_text("visitor_id\nv1\n", encoding="utf-8")
    r = run_inprocess(tmp_path, "assign", "--spec", spec.name, "ids.txt")
    assert r.returncode == 4 and "line 1 is 'visitor_id', a column name" in r.stderr
    ok = run_inprocess(tmp_path, "assign", "--spec", spec.name, "ids.txt", "--column", "visitor_id")
    assert ok.returncode == 0 and ok.stdout.decode().count("\n") == 2


def test_ids_only_into_parquet_is_refused(tmp_path: Path) -> None:
    spec = write_spec(tmp_path)
    r = run_inprocess(tmp_path, "assign", "--spec", spec.name, "--ids-only", "--out", "x.parquet", stdin=b"v1\n")
    assert r.returncode == 4 and "--ids-only writes one id per line of text, not Parquet" in r.stderr
    assert not (tmp_path / "x.parquet").exists()


def test_a_minimal_visits_file_names_every_missing_column_at_once(tmp_path: Path) -> None:
    spec = write_spec(tmp_path)
    (tmp_path / "min.csv").write_text("unit_id\nv1\n", encoding="utf-8")
    r = run_inprocess(tmp_path, "audit", "--spec", spec.name, "--visits", "min.csv")
    assert r.returncode == 4
    line = r.stderr.splitlines()[0]
    assert "columns not found in the visits file: 'first_seen', 'arm'" in line and "the file has columns: unit_id" in line


def test_integer_parquet_ids_are_hashed_as_decimal_text_and_said(tmp_path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    spec = write_spec(tmp_path)
    pq.write_table(pa.table({"unit_id": pa.array([101, 102], pa.int64())}), tmp_path / "ids.parquet")
    r = run_inprocess(tmp_path, "assign", "--spec", spec.name, "ids.parquet")
    text = run_inprocess(tmp_path, "assign", "--spec", spec.name, stdin=b"101\n102\n")
    assert r.returncode == 0 and "ids in 'unit_id' are integers; hashed as their decimal text" in r.stderr
    assert r.stdout == text.stdout  # the same arms as the ids written as text
