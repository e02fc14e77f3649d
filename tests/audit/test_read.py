"""The reader's edge cases in Parquet: naive timestamps, integer ids, null ids and categories, missing columns."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from armlock.assign import InputError, arm_for, spec_from_dict
from armlock.audit.render import check_by_id
from armlock.audit.run import run_audit

SPEC = spec_from_dict({"name": "r", "salt": "read-salt", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                       "audit": {"segments": ["device"], "covariates": [], "categorical_covariates": []}})


def _write(path: Path, ids: list, times: pa.Array, devices: list) -> None:  # type: ignore[type-arg]
    arms = [arm_for(SPEC, str(i)) if i is not None else "holdout" for i in ids]
    pq.write_table(pa.table({"unit_id": ids, "first_seen": times, "arm": arms, "device": devices}), path)


def test_parquet_naive_times_and_null_ids(tmp_path: Path) -> None:
    n = 30
    ids = [f"p{i}" for i in range(n)]
    ids[4] = None
    times = pa.array(pd.date_range("2026-01-06", periods=n, freq="h").to_numpy(), type=pa.timestamp("us"))
    devices = ["mobile", None] * (n // 2)
    _write(tmp_path / "v.parquet", ids, times, devices)
    rep = run_audit(SPEC, visits=tmp_path / "v.parquet")
    assert "v.parquet: times in 'first_seen' have no zone; read as UTC" in rep.input_notes
    assert ("v.parquet: 1 row(s) with an empty or null 'unit_id' (row 5) were set aside: they have no arm"
            in rep.input_notes)
    seg = [t for t in check_by_id(rep, "srm_segments").tables if t.title == "Units per arm by device"][0]
    assert sorted(r[0] for r in seg.rows) == ["(missing)", "mobile"]
    assert check_by_id(rep, "integrity").figures["first_seen_min"].value == "2026-01-06T00:00:00+00:00"


def test_parquet_integer_ids_are_hashed_as_text(tmp_path: Path) -> None:
    ids = list(range(100, 140))
    times = pa.array(pd.date_range("2026-01-06", periods=40, freq="h", tz="UTC").to_numpy(), type=pa.timestamp("us", tz="UTC"))
    _write(tmp_path / "v.parquet", ids, times, ["desktop"] * 40)
    rep = run_audit(SPEC, visits=tmp_path / "v.parquet")
    assert "v.parquet: ids in 'unit_id' are integers; hashed as their decimal text" in rep.input_notes
    assert check_by_id(rep, "integrity").figures["mismatches"].value == 0


def test_parquet_missing_column_lists_columns(tmp_path: Path) -> None:
    pq.write_table(pa.table({"uid": ["a"], "first_seen": ["2026-01-06T00:00:00Z"]}), tmp_path / "v.parquet")
    with pytest.raises(InputError) as exc:
        run_audit(SPEC, visits=tmp_path / "v.parquet")
    assert str(exc.value) == (f"{tmp_path / 'v.parquet'}: column 'unit_id' not found in the visits file (spec: "
                              "[audit.visits] unit_id = \"unit_id\"); the file has columns: uid, first_seen")


def test_not_a_parquet_file(tmp_path: Path) -> None:
    (tmp_path / "v.parquet").write_text("unit_id\nx\n", encoding="utf-8")
    with pytest.raises(InputError, match="cannot read the visits file as Parquet"):
        run_audit(SPEC, visits=tmp_path / "v.parquet")
