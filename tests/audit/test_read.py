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
    # every missing column at once (issue #20), not one per run
    assert str(exc.value) == (f"{tmp_path / 'v.parquet'}: 3 columns not found in the visits file: 'unit_id', 'arm', "
                              "'device' (spec: [audit.visits] unit_id = \"unit_id\", [audit.visits] arm = \"arm\", "
                              "[audit] segments[0] = \"device\"); the file has columns: uid, first_seen")


def test_not_a_parquet_file(tmp_path: Path) -> None:
    (tmp_path / "v.parquet").write_text("unit_id\nx\n", encoding="utf-8")
    with pytest.raises(InputError, match="cannot read the visits file as Parquet"):
        run_audit(SPEC, visits=tmp_path / "v.parquet")


# -- decimals and sub-microsecond times ---------------------------------------------------------------

def test_decimal_numbers_are_the_nearest_double() -> None:
    """Decimal columns (a warehouse's money type) read as the nearest double to each exact decimal.

    Reference outside the project: Python's `decimal` module, whose `float(Decimal)` is correctly
    rounded (IEEE 754 round to nearest, ties to even). Arrow's own cast misses it for about one
    value in eight at decimal(12, 2), so it is not what the reader uses. (Above 2**53 an 18-digit
    unscaled value is first rounded to a double, as Spark's `Decimal.toDouble` does.)"""
    import random
    from decimal import Decimal

    import numpy as np

    from armlock.shared.read import decimal_floats

    rng = random.Random(7)
    for p, s in ((12, 2), (18, 6), (9, 4), (18, 0), (30, 10)):
        top = 10**p - 1 if p > 18 else min(10**p - 1, 2**53 - 1)  # up to 18 digits: exact below 2**53
        vals = [Decimal(rng.randint(-top, top)).scaleb(-s) for _ in range(5000)] + [None]
        arr = pa.chunked_array([pa.array(vals[:2500], pa.decimal128(p, s)),
                                pa.array(vals[2500:], pa.decimal128(p, s)).slice(1)])  # a sliced chunk too
        got = decimal_floats(arr)
        want = np.array([np.nan if v is None else float(v) for v in vals[:2500] + vals[2501:]])
        assert np.array_equal(got, want, equal_nan=True), (p, s)


def test_decimal_covariate_and_sub_microsecond_times(tmp_path: Path) -> None:
    """A decimal covariate is read (it was refused); nanosecond digits are dropped to the microsecond."""
    from decimal import Decimal

    spec = spec_from_dict({"name": "r", "salt": "read-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                           "audit": {"segments": [], "covariates": ["spend"], "categorical_covariates": []}})
    n = 40
    ids = [f"d{i}" for i in range(n)]
    ns = pd.date_range("2026-01-06", periods=n, freq="h").as_unit("ns").asi8 + 123_456_789
    pq.write_table(pa.table({"unit_id": ids, "first_seen": pa.array(ns, pa.timestamp("ns", "UTC")),
                             "arm": [arm_for(spec, i) for i in ids],
                             "spend": pa.array([Decimal(i * 7).scaleb(-2) for i in range(n)], pa.decimal128(12, 2))}),
                   tmp_path / "v.parquet")
    rep = run_audit(spec, visits=tmp_path / "v.parquet")
    assert check_by_id(rep, "integrity").figures["first_seen_min"].value == "2026-01-06T00:00:00.123456+00:00"
    assert any("spend" in str(t.rows) for t in check_by_id(rep, "balance").tables)


def test_times_outside_the_engine_range_name_the_row(tmp_path: Path) -> None:
    path = tmp_path / "v.csv"
    path.write_text("unit_id,first_seen,arm\na,2026-01-06T00:00:00Z,holdout\nb,1500-01-01T00:00:00.5Z,holdout\n",
                    encoding="utf-8")
    spec = spec_from_dict({**SPEC.model_dump(mode="json"), "audit": {"segments": [], "covariates": [],
                                                                      "categorical_covariates": []}})
    with pytest.raises(InputError, match=r"1 time\(s\) outside the years 1678-2261 \(first: line 3; "
                                         r"e\.g\. 1500-01-01 00:00:00\.500000\+00:00\)"):
        run_audit(spec, visits=path)


def test_a_missing_column_two_settings_name_is_said_once(tmp_path: Path) -> None:
    from armlock.shared.read import Source, _need

    src = Source(tmp_path / "v.csv", "visits")
    wanted = {"unit_id": "unit_id", "[audit] segments[0]": "device", "[audit] categorical_covariates[0]": "device"}
    with pytest.raises(InputError) as e:
        _need(src, ["uid"], wanted, "[audit.visits]")
    msg = str(e.value)
    assert "2 columns not found" in msg and msg.count("'device'") == 1, msg
