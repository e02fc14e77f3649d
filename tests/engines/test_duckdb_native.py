"""The DuckDB engine's native exposure path (DuckDB reads the Parquet log itself) against its sliced reader.

Each case runs the DuckDB engine twice on the same files, once on the native path
(`shared/engine_duckdb_native.py`) and once forced onto the sliced reader (`native=False`), and
asserts equal tables, notes, counts and JSON reports (and the pandas engine's, the reference of
`test_duckdb_engine.py`): every seeded fault of `audit/synth.py`, exact duplicates in a log in whole
seconds, an as-of cut, empty ids, missing times, unmapped and missing kinds, missing campaigns,
nanosecond timestamps before 1970 (rounded down, not toward zero), small Parquet row groups (so ties
and duplicates straddle them), and the cases the native path hands to the sliced reader (an unsorted
log, times outside 1678-2261, a gzip CSV, a damaged file), with the same errors word for word.
The reference outside the project is the pandas engine (pandas/pyarrow/numpy), as in
`test_duckdb_engine.py`.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from armlock.assign import InputError, Spec
from armlock.shared import engine_duckdb_native
from armlock.shared.engine import Inputs, PandasEngine
from armlock.shared.engine_duckdb import DuckDBEngine
from armlock.audit.synth import FAULTS, generate, write_logs

from .test_spark_engine import _spec, assert_parity


def _three(spec: Spec, paths: dict[str, Path], as_of: date | None = None,
           path: str = "native") -> tuple[Any, Any, Any]:
    """The pandas engine, the native path and the sliced reader on the same files (the native one
    asserted to have taken `path`)."""
    inputs = Inputs(paths["visits"], paths["exposures"], paths.get("identities"))
    p = PandasEngine().compute(spec, inputs, as_of, lambda n: None)
    eng = DuckDBEngine()
    n = eng.compute(spec, inputs, as_of, lambda n: None)
    assert eng.exposure_path == path
    s = DuckDBEngine(native=False).compute(spec, inputs, as_of, lambda n: None)
    assert_parity(spec, s, n)
    assert_parity(spec, p, n)
    assert np.array_equal(s.tables.leakage.exposed_rows, n.tables.leakage.exposed_rows)
    return p, n, s


def _rewrite(paths: dict[str, Path], frame: pd.DataFrame, row_group_size: int = 1000) -> None:
    """Write the exposures again in small row groups (ties and repeats then straddle them)."""
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), paths["exposures"],
                   row_group_size=row_group_size)


@pytest.mark.parametrize("seed", [7, 8])
def test_every_fault_both_paths(tmp_path: Path, seed: int) -> None:
    spec = _spec("three_arms" if seed == 7 else "ninety_ten", salt=f"native-{seed}")
    logs = generate(spec, units=1500, days=28, seed=seed, faults=FAULTS, events_per_unit=3.0)
    paths = write_logs(logs, tmp_path, "parquet")
    _rewrite(paths, logs.exposures, 997)
    p, n, _ = _three(spec, paths)
    assert n.tables.leakage.rows > 3000 and sum(n.tables.leakage.unseen_by_arm.values()) >= 0
    _three(spec, paths, as_of=date(2026, 1, 20))


@pytest.mark.parametrize("tie_rows", [2_000_000, 10])
def test_duplicates_as_of_and_set_aside_rows(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, tie_rows: int) -> None:
    """Whole-second times (many rows share one), exact repeats next to and far from the original,
    empty ids, missing times, unmapped and empty kinds, missing campaigns, an as-of cut; the rows
    that share a time marked in the joined query, or (past `TIE_ROWS`) the repeats found beforehand."""
    monkeypatch.setattr(engine_duckdb_native, "TIE_ROWS", tie_rows)
    spec = _spec("ninety_ten", salt="native-aside")
    logs = generate(spec, units=700, days=21, seed=51, faults=("leakage", "pre_exposure"), events_per_unit=4.0)
    e = logs.exposures
    c = spec.audit.exposures
    e[c.time] = pd.to_datetime(e[c.time], utc=True).dt.floor("s")
    e[c.kind] = e[c.kind].astype(object)
    e[c.campaign] = e[c.campaign].astype(object)
    rng = np.random.default_rng(9)
    e = pd.concat([e, e.iloc[np.flatnonzero(rng.random(len(e)) < 0.1)]], ignore_index=True)
    e = e.sort_values(c.time, kind="stable").reset_index(drop=True)
    e.loc[e.index % 97 == 3, c.unit_id] = ""
    e.loc[e.index % 101 == 4, c.unit_id] = None
    e.loc[e.index % 89 == 5, c.time] = pd.NaT
    e.loc[e.index % 83 == 7, c.kind] = "view"
    e.loc[e.index % 61 == 8, c.kind] = "video start"
    e.loc[e.index % 79 == 9, c.kind] = ""
    e.loc[e.index % 71 == 11, c.campaign] = None
    e.loc[e.index % 67 == 13, c.campaign] = ""
    logs.exposures = e
    paths = write_logs(logs, tmp_path, "parquet")
    _rewrite(paths, e, 500)
    for as_of in (None, date(2026, 1, 14)):
        p, n, _ = _three(spec, paths, as_of=as_of)
        assert n.counts["exposure_duplicate_rows"] > 20
        for key in ("exposure_empty_ids", "exposure_missing_time"):
            assert n.counts[key] > 0, key
    assert n.counts["exposures_after_as_of"] > 0
    assert any("'view'" in x or "view" in x for x in n.notes)


def test_nanoseconds_before_1970_round_down(tmp_path: Path) -> None:
    """Nanosecond timestamps: digits below the microsecond dropped, rounding down (also before 1970,
    where DuckDB's own conversion would round toward zero)."""
    spec = _spec("two_arms", salt="native-ns")
    logs = generate(spec, units=400, days=14, seed=61, faults=("leakage",), events_per_unit=3.0)
    paths = write_logs(logs, tmp_path, "parquet")
    e = logs.exposures.copy()
    c = spec.audit.exposures
    ns = pd.to_datetime(e[c.time], utc=True).dt.as_unit("ns").astype("int64").to_numpy()
    ns = np.sort(ns) + 999  # sub-microsecond digits on every row
    ns[:50] = np.arange(50) * 1000 - 10**9 - 1  # before 1970, in order
    e[c.time] = pd.to_datetime(ns, utc=True)
    e[c.time] = e[c.time].dt.as_unit("ns")
    _rewrite(paths, e)
    assert pq.read_schema(paths["exposures"]).field(c.time).type == pa.timestamp("ns", "UTC")
    _three(spec, paths)


def test_what_the_sliced_reader_takes_over(tmp_path: Path) -> None:
    """An unsorted log, a gzip CSV, text times: the sliced reader, with the same report."""
    spec = _spec("three_arms", salt="native-handover")
    logs = generate(spec, units=600, days=14, seed=71, faults=FAULTS, events_per_unit=3.0)
    paths = write_logs(logs, tmp_path / "pq", "parquet")
    shuffled = logs.exposures.iloc[np.random.default_rng(3).permutation(len(logs.exposures))]
    _rewrite(paths, shuffled.reset_index(drop=True))
    _three(spec, paths, path="sliced")
    gz = write_logs(logs, tmp_path / "gz", "csv.gz")
    _three(spec, gz, path="sliced")
    text = dict(paths)
    e = logs.exposures.copy()
    c = spec.audit.exposures
    e[c.time] = pd.to_datetime(e[c.time], utc=True).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    text["exposures"] = tmp_path / "text.parquet"
    pq.write_table(pa.Table.from_pandas(e, preserve_index=False), text["exposures"])
    _three(spec, text, path="sliced")


def test_errors_word_for_word(tmp_path: Path) -> None:
    """Times beyond 2261 and a damaged Parquet file: the sliced reader's errors, as the pandas engine's."""
    spec = _spec("two_arms", salt="native-errors")
    logs = generate(spec, units=300, days=14, seed=81, faults=(), events_per_unit=3.0)
    paths = write_logs(logs, tmp_path, "parquet")
    e = logs.exposures.copy()
    c = spec.audit.exposures
    us = pd.to_datetime(e[c.time], utc=True).dt.as_unit("us").astype("int64").to_numpy().copy()
    us[-3:] = np.int64(10**16)  # the year 2286, in order at the end
    e[c.time] = pa.array(us, pa.timestamp("us", "UTC"))
    _rewrite(paths, e)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(paths["exposures"].read_bytes()[:-200])
    for exposures in (paths["exposures"], broken):
        msgs = []
        for engine in (PandasEngine(), DuckDBEngine(), DuckDBEngine(native=False)):
            with pytest.raises(InputError) as exc:
                engine.compute(spec, Inputs(paths["visits"], exposures), None, lambda n: None)
            msgs.append(str(exc.value))
        assert msgs[0] == msgs[1] == msgs[2], msgs
        assert str(exposures) in msgs[0]
    assert f"column '{c.time}' has 3 time(s) outside the years 1678-2261" in msgs[0] or "cannot read" in msgs[0]


@pytest.mark.parametrize("tie_rows", [2_000_000, 10])
def test_many_shared_times_stay_native(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, tie_rows: int) -> None:
    """A log in whole hours (most rows share a time with many others) with exact repeats, unseen
    ids and leaks among them: the native path keeps the log, whether the query marks the rows that
    share a time (few enough) or the repeats are found beforehand, a row group at a time."""
    monkeypatch.setattr(engine_duckdb_native, "TIE_ROWS", tie_rows)
    spec = _spec("two_arms", salt="native-ties")
    logs = generate(spec, units=400, days=14, seed=91, faults=("leakage", "pre_exposure"), events_per_unit=3.0)
    c = spec.audit.exposures
    e = logs.exposures
    e[c.time] = pd.to_datetime(e[c.time], utc=True).dt.floor("h")
    unseen = e[~e[c.unit_id].isin(logs.visits[spec.audit.visits.unit_id])]
    assert len(unseen)
    e = pd.concat([e, e.iloc[::7], unseen], ignore_index=True)  # every unseen id's rows repeated too
    logs.exposures = e.sort_values(c.time, kind="stable").reset_index(drop=True)
    paths = write_logs(logs, tmp_path, "parquet")
    _rewrite(paths, logs.exposures, 311)
    p, n, _ = _three(spec, paths)
    assert n.counts["exposure_duplicate_rows"] >= len(e) // 8


def test_too_many_repeats_go_to_the_sliced_reader(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Past the repeats limit (held in memory until they are taken off) the sliced reader
    de-duplicates as it streams."""
    spec = _spec("two_arms", salt="native-repeats")
    logs = generate(spec, units=400, days=14, seed=92, faults=(), events_per_unit=3.0)
    c = spec.audit.exposures
    e = pd.concat([logs.exposures, logs.exposures.iloc[::5]], ignore_index=True)
    logs.exposures = e.sort_values(c.time, kind="stable").reset_index(drop=True)
    paths = write_logs(logs, tmp_path, "parquet")
    monkeypatch.setattr(engine_duckdb_native, "TIE_ROWS", 10)
    monkeypatch.setattr(engine_duckdb_native, "REPEAT_ROWS", 10)
    monkeypatch.setattr(engine_duckdb_native, "REPEAT_SHARE", 10**9)
    _three(spec, paths, path="sliced")


def test_visits_ending_before_the_exposures(tmp_path: Path) -> None:
    """No as-of day given and the visits end days before the exposure log: the cut falls in the
    middle of the log, after the time pass has read all of it (its repeats and days past the cut
    are set aside with their rows)."""
    spec = _spec("ninety_ten", salt="native-early-cut")
    logs = generate(spec, units=600, days=21, seed=93, faults=("leakage",), events_per_unit=3.0)
    cv = spec.audit.visits
    seen = pd.to_datetime(logs.visits[cv.first_seen], utc=True)
    logs.visits = logs.visits[seen < seen.min() + pd.Timedelta(days=10)].reset_index(drop=True)
    paths = write_logs(logs, tmp_path, "parquet")
    p, n, _ = _three(spec, paths)
    assert n.counts["exposures_after_as_of"] > 0
