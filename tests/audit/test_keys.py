"""audit.keys: integer keys of text ids and exact duplicate rows, checked against pandas and plain Python."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from armlock.assign import InputError
from armlock.shared import keys
from armlock.shared.read import Source, read_times


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 6), st.integers(-3, 3), st.integers(-(2**63), 2**63 - 1)), max_size=60),
       st.integers(0, 2))
def test_duplicate_rows_equal_pandas_duplicated(rows: list[tuple[int, int, int]], repeat: int) -> None:
    # Reference: pandas.DataFrame.duplicated (keep="first"), a general-purpose library's definition.
    rows = rows + rows[: repeat * len(rows) // 3]
    a = np.array([r[0] for r in rows], dtype=np.int64)
    b = np.array([r[1] for r in rows], dtype=np.int8)
    c = np.array([r[2] for r in rows], dtype=np.int64)
    ref = pd.DataFrame({"a": a, "b": b, "c": c}).duplicated().to_numpy()
    assert (keys.duplicate_rows(a, b, c) == ref).all()


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 5), st.integers(0, 3), st.integers(0, 2)), max_size=80))
def test_duplicate_rows_of_a_time_sorted_log(rows: list[tuple[int, int, int]]) -> None:
    # A first key that never decreases (a log sorted by time) takes the path that looks only at
    # runs of equal times; the answer must still be pandas' (keep="first").
    rows = sorted(rows, key=lambda r: r[0])
    t, u, c = (np.array([r[i] for r in rows], dtype=np.int64) for i in range(3))
    ref = pd.DataFrame({"t": t, "u": u, "c": c}).duplicated().to_numpy()
    assert (keys.duplicate_rows(t, u, c) == ref).all()


def test_duplicate_rows_when_mixes_collide(monkeypatch: pytest.MonkeyPatch) -> None:
    # With every multiplier 0 all rows share one mix: the exact comparison alone must decide.
    monkeypatch.setattr(keys, "_MULTIPLIERS", (0,))
    rng = np.random.default_rng(3)
    a, t = rng.integers(0, 5, 2_000), rng.integers(0, 5, 2_000)
    ref = pd.DataFrame({"a": a, "t": t}).duplicated().to_numpy()
    assert ref.sum() > 0 and (~ref).sum() > 0
    assert (keys.duplicate_rows(a, t) == ref).all()


def test_duplicate_rows_of_a_log_appended_twice() -> None:
    rng = np.random.default_rng(4)
    a, t = rng.integers(0, 10**6, 50_000), rng.integers(0, 2**60, 50_000)
    dup = keys.duplicate_rows(np.concatenate([a, a]), np.concatenate([t, t]))
    assert not dup[:50_000].any() and dup[50_000:].all()


def test_positions_and_unit_codes_match_a_dictionary() -> None:
    visits = pd.Series(["u1", "", "naïve", "𝔘2", "a,b", "x\ny"], dtype="str")
    ids = pd.Series(["𝔘2", "zz", "u1", "zz", "", "q", "x\ny", "U1"], dtype="str")
    where = {v: i for i, v in enumerate(visits)}
    pos = keys.positions(ids, keys.arrow_ids(visits).combine_chunks())
    assert pos.tolist() == [where.get(i, -1) for i in ids]
    codes = keys.unit_codes(ids, pos, len(visits))
    for i in range(len(ids)):
        for j in range(len(ids)):
            assert (codes[i] == codes[j]) == (ids[i] == ids[j])
    assert (codes[pos < 0] >= len(visits)).all()


def test_positions_in_slices_equal_one_lookup() -> None:
    visits = pd.Series([f"v{i}" for i in range(5_000)], dtype="str")
    ids = pd.Series([f"v{i}" for i in np.random.default_rng(5).integers(0, 6_000, 1_200_000)], dtype="str")
    vset = keys.arrow_ids(visits).combine_chunks()
    sliced = keys.positions(ids, vset)  # above a million ids: in slices on threads
    expected = np.array([int(s[1:]) if int(s[1:]) < 5_000 else -1 for s in ids[:2_000]])
    assert (sliced[:2_000] == expected).all()
    assert ((sliced >= 0) == ids.map(lambda s: int(s[1:]) < 5_000).to_numpy()).all()


@settings(max_examples=100, deadline=None)
@given(st.lists(st.sampled_from(["a", "b", "", "𝔘", "a,b", "x\ny", "NA"]), max_size=40))
def test_repeated_rows_of_one_column_equal_pandas_duplicated(ids: list[str]) -> None:
    # Reference: pandas.Series.duplicated (keep="first").
    s = pd.Series(ids, dtype="str")
    assert keys.repeated_rows(s).tolist() == s.astype(object).duplicated().tolist()


def test_repeated_rows_across_chunks() -> None:
    s = pd.Series(pd.arrays.ArrowStringArray(pa.chunked_array([["a", "b"], ["b", "c", "a"], []])))
    assert keys.repeated_rows(s).tolist() == [False, False, True, False, True]


def test_ns_of_reads_any_unit() -> None:
    s = pd.Series(pd.to_datetime(["2026-01-05T00:00:00.000001Z", "1970-01-01T00:00:01Z"], utc=True, format="ISO8601"))
    assert keys.ns_of(s).tolist() == [pd.Timestamp("2026-01-05T00:00:00.000001Z").value, 10**9]
    assert keys.ns_of(s.dt.as_unit("us")).tolist() == keys.ns_of(s).tolist()


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
def test_zoned_parquet_times_in_every_unit(tmp_path: Path, unit: str) -> None:
    # Parquet timestamps with a zone take Arrow's direct cast; the instant is kept whatever the zone.
    when = pd.Timestamp("2026-01-05T10:00:00+01:00")
    table = pa.table({"t": pa.array([when, None], type=pa.timestamp(unit, "Europe/Berlin"))})
    pq.write_table(table, tmp_path / "t.parquet")
    out = read_times(Source(tmp_path / "t.parquet", "visits"), pq.read_table(tmp_path / "t.parquet"), "t", [])
    assert str(out.dtype) == "datetime64[ns, UTC]"
    assert out.iloc[0] == pd.Timestamp("2026-01-05T09:00:00Z") and pd.isna(out.iloc[1])


def test_zoned_parquet_times_out_of_range_name_the_row(tmp_path: Path) -> None:
    import datetime as dt

    far = dt.datetime(2300, 1, 1, tzinfo=dt.UTC)
    table = pa.table({"t": pa.array([dt.datetime(2026, 1, 1, tzinfo=dt.UTC), far], type=pa.timestamp("us", "UTC"))})
    pq.write_table(table, tmp_path / "t.parquet")
    with pytest.raises(InputError, match=r"t.parquet: column 't' has 1 time\(s\) outside the years 1678-2261 "
                                         r"\(first: row 2"):
        read_times(Source(tmp_path / "t.parquet", "visits"), pq.read_table(tmp_path / "t.parquet"), "t", [])


@settings(max_examples=150, deadline=None)
@given(st.lists(st.sampled_from(["a", "b", "ü", "", "a ", "B", "𝔘"]), max_size=12),
       st.lists(st.sampled_from(["a", "b", "ü", "", "a ", "B", "𝔘", "c", "d", "e", "f"]), min_size=1, max_size=40),
       st.booleans())
def test_positions_of_few_ids_equal_arrow_index_in(ids: list[str], visits: list[str], with_null: bool) -> None:
    # Reference: pyarrow.compute.index_in (Apache Arrow): the first row of the value set holding each
    # id. With at most half as many ids as the value set (repeats and nulls included), `positions`
    # builds its hash set over the ids instead; the answer must not change.
    arr = pa.chunked_array([pa.array(ids + ([None] if with_null else []), pa.large_string())])
    vset = pa.array(visits + ([None] if with_null and len(visits) % 2 else []), pa.large_string())
    ref = pc.fill_null(pc.index_in(arr, value_set=vset), -1).to_numpy()
    assert keys.positions(arr, vset).tolist() == ref.tolist()
    codes, uniq = keys.distinct_codes(arr)
    assert uniq.take(pa.array(codes)).to_pylist() == arr.to_pylist()
    assert keys.positions(uniq, vset, distinct=True).tolist() == pc.fill_null(
        pc.index_in(uniq, value_set=vset), -1).to_numpy().tolist()


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.text(alphabet="ab\u00fc\u20ac", min_size=2, max_size=2),
                          st.text(alphabet="xy\u00e9", min_size=0, max_size=2)), max_size=40), st.booleans())
def test_repeated_rows_equal_pandas_duplicated(rows: list[tuple[str, str]], sliced: bool) -> None:
    # Reference: pandas' Series.duplicated and DataFrame.duplicated (keep="first"). Ids of one byte
    # length take the path that compares their bytes as words, others are numbered; two characters
    # of 1-3 bytes each, and texts of 0-2 characters, give every path alone and mixed.
    frame = pd.DataFrame({"u": [r[0] for r in rows], "c": [r[1] for r in rows]}, dtype="str")
    if sliced:
        frame = frame.iloc[1::2]
    assert keys.repeated_rows(frame["u"]).tolist() == frame["u"].duplicated().tolist()
    assert keys.repeated_rows(frame["c"]).tolist() == frame["c"].duplicated().tolist()
    assert keys.repeated_rows(frame["u"], frame["c"]).tolist() == frame.duplicated().tolist()


@settings(max_examples=100, deadline=None)
@given(st.lists(st.sampled_from(["a", "b", "ü", "", "a ", "B", "𝔘", "c", "zz"]), max_size=30),
       st.lists(st.sampled_from(["a", "b", "ü", "", "a ", "B", "𝔘", "c", "d", "e"]), unique=True, max_size=10),
       st.booleans())
def test_duckdb_unit_rows_equal_arrow_index_in(ids: list[str], units: list[str], with_null: bool) -> None:
    # Reference: pyarrow.compute.index_in (Apache Arrow). The DuckDB engine's readout finds each
    # order's unit with DuckDB's hash join (`engine_duckdb.unit_rows`); the units are distinct (the
    # visits' loader keeps one row per unit), and an id that is null, or in no unit, gets -1.
    from armlock.shared.engine_duckdb import unit_rows

    arr = pa.array(ids + ([None] if with_null else []), pa.large_string())
    vset = pa.array(units, pa.large_string())
    ref = pc.fill_null(pc.index_in(arr, value_set=vset), -1).to_numpy()
    assert unit_rows(arr, vset).tolist() == ref.tolist()
    assert unit_rows(pd.Series(ids, dtype="str"), vset).tolist() == ref[:len(ids)].tolist()
