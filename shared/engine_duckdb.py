"""The DuckDB engine (embedded, the default): exposure rows are counted inside DuckDB; only per-unit and per-cell tables come out.

Visits and identity links are read by `audit.load` (one row per unit or link) and counted by
`audit.engine_pandas`; the exposure log, the one that grows with the traffic, is streamed slice by
slice (`audit.engine_duckdb_read`) into one DuckDB query that joins each row to its unit and
groups it by unit and by the holdout's campaign and week cells. What comes back (`cells`) has one
row per exposed unit, per unseen id and per leaked (unit, campaign, week): memory grows with units
and cells, never with rows. Arms are the contract's (`contract_arms`: XXH64 of each distinct id,
computed once, from the Arrow buffers), joined in DuckDB by id. The slices reach DuckDB through
one stream per core (`Ahead`), so its join and grouping run on every core.

DuckDB runs under a memory limit (`--memory-limit`, DuckDB's own default otherwise: 80 % of the
machine's memory) and spills to a temporary folder (`--temp-dir`, else a new folder under the
system's temporary directory, removed afterwards); when even that is not enough, the run stops
with an `Error:` that says so.
"""

from __future__ import annotations

import os
import queue
import shutil
import tempfile
import threading
from collections.abc import Callable, Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import ExitStack, contextmanager
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from armlock.assign import InputError, Spec

from . import engine_pandas
from .engine import EngineResult, Inputs, ReadoutResult, file_bytes, local_path, readout_builder
from .engine_duckdb_dense import CellSums, arrow_of
from .engine_duckdb_native import Native, floor_div, prepared
from .engine_duckdb_read import STREAM_SCHEMA, ExposureReader, ExposureScan, Unsorted
from .engine_pandas import NS_DAY, VisitArms, _recorded_codes, _unseen_diagnostics
from .keys import arrow_ids
from .load import load_identities, load_visits
from .read import ARM, TIME, UNIT, Frames
from .tables import AuditTables, LeakageTables

US_DAY = NS_DAY // 1000
READERS = max(1, min(os.cpu_count() or 1, 4))  # streams DuckDB scans at once (one per core)
DUCKDB_INSTALL = "pip install duckdb"


@contextmanager
def connect(memory_limit: str | None, temp_directory: str | None) -> Iterator[Any]:
    """A DuckDB connection in memory with the limit and the spill folder (a fresh one removed afterwards)."""
    try:
        import duckdb
    except ImportError:
        raise InputError(f"the DuckDB engine needs the duckdb package, which is not installed: {DUCKDB_INSTALL}") from None
    made = None if temp_directory is not None else tempfile.mkdtemp(prefix="armlock-duckdb-")
    spill = temp_directory if temp_directory is not None else made
    assert spill is not None
    # The exposure stream's size is unknown to DuckDB's planner, which may then build a join's hash
    # table on it (all the rows) rather than on the units: the join order is fixed as written.
    config: dict[str, str | bool | int | float | list[str]] = {
        "temp_directory": spill, "preserve_insertion_order": False,
        "disabled_optimizers": "join_order,build_side_probe_side"}
    if memory_limit:
        config["memory_limit"] = memory_limit
    try:
        con = duckdb.connect(":memory:", config=config)
    except duckdb.Error as exc:
        raise InputError(f"cannot start DuckDB with --memory-limit {memory_limit!r} and --temp-dir "
                         f"{temp_directory!r}: {str(exc).splitlines()[0]}") from None
    try:
        yield con
    finally:
        con.close()
        if made is not None:
            shutil.rmtree(made, ignore_errors=True)


@contextmanager
def system_allocator() -> Iterator[None]:
    """Arrow's allocations on the system allocator while the logs are read and counted (the default
    pool comes back afterwards; each buffer is freed to the pool it came from). Arrow's default,
    mimalloc, hands freed memory back and takes it again, and the kernel zeroes each fresh page:
    at 2 M units, five audits in turn with each allocator took 4.15 against 4.49 s and 7.9 against
    8.5 CPU-seconds (means), and 1.25 against 1.35-1.43 GB at the peak."""
    before = pa.default_memory_pool()
    pa.set_memory_pool(pa.system_memory_pool())
    try:
        yield
    finally:
        pa.set_memory_pool(before)


def unit_rows(ids: pd.Series | pa.ChunkedArray | pa.Array, units: pa.Array) -> np.ndarray:
    """Row of each id in `units` (the visits' units, each once), -1 when it is not there: what
    `keys.positions` gives, by DuckDB's parallel hash join (1.4 M order ids against 2 M units: 0.3
    CPU-seconds, against 0.8 for Arrow's lookup)."""
    import duckdb

    arr = ids if isinstance(ids, (pa.ChunkedArray, pa.Array)) else arrow_ids(ids)
    out = np.full(len(arr), -1, np.int64)
    if not len(arr) or not len(units):
        return out
    con = duckdb.connect(":memory:")
    try:
        con.register("u", pa.table({"id": units, "pos": pa.array(np.arange(len(units), dtype=np.int64))}))
        con.register("q", pa.table({"id": arr, "r": pa.array(np.arange(len(arr), dtype=np.int64))}))
        found = con.sql("SELECT q.r, u.pos FROM q JOIN u ON q.id = u.id").fetchnumpy()
    finally:
        con.close()
    out[np.asarray(found["r"], dtype=np.int64)] = np.asarray(found["pos"], dtype=np.int64)
    return out


def contract_arms(spec: Spec, ids: pd.Series) -> np.ndarray:
    """The contract's arm index of every id (as `engine_pandas.hash_arms`), hashed from the Arrow buffers.

    XXH64 (the xxhash package, seed 42) of salt + ":" + the id's UTF-8 bytes, sliced straight from
    the Arrow data buffer (no Python string per id), then the arm by the contract's thresholds on
    the raw hash (`assign.contract.hash_thresholds`), for all ids at once in numpy. Empty ids have
    no arm and never reach here (the loader sets them aside)."""
    import xxhash

    from armlock.assign.contract import SEED, SEPARATOR, hash_thresholds

    arr = arrow_ids(ids).cast(pa.large_string()).combine_chunks()
    if not len(arr):
        return np.zeros(0, np.int16)
    offsets = np.frombuffer(arr.buffers()[1], dtype=np.int64)[arr.offset:arr.offset + len(arr) + 1].tolist()
    data = arr.buffers()[2].to_pybytes() if arr.buffers()[2] is not None else b""
    prefix, h = (spec.salt + SEPARATOR).encode(), xxhash.xxh64_intdigest
    hashes = np.fromiter((h(prefix + data[a:b], SEED) for a, b in zip(offsets, offsets[1:])), dtype=np.uint64,
                         count=len(arr))
    cuts = np.array(hash_thresholds(spec.cumulative)[:-1], dtype=np.uint64)  # the last is 2**64: every hash
    return np.searchsorted(cuts, hashes, side="right").astype(np.int16)


_floor_div = floor_div


def _day(us: int) -> str:
    return str(np.datetime64(int(us) // US_DAY, "D"))


class DuckDBEngine:
    """The embedded engine on DuckDB: memory grows with units and cells, never with exposure rows."""

    name = "duckdb"

    def __init__(self, memory_limit: str | None = None, temp_directory: str | None = None,
                 native: bool = True) -> None:
        self.memory_limit, self.temp_directory = memory_limit, temp_directory
        self.native = native  # False: always the sliced reader (the native path's parity tests compare both)
        self.exposure_path = ""  # which path counted the last exposure log: "native" or "sliced"

    def compute(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> EngineResult:
        fr, used, tables = self.load_and_count(spec, inputs, as_of, advance)
        return EngineResult(tables=tables, as_of=used, notes=fr.notes, counts=fr.counts,
                            data_through=fr.data_through)

    def readout(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> ReadoutResult:
        return readout_builder(self.name)(self, spec, inputs, as_of, advance)

    def load_and_count(self, spec: Spec, inputs: Inputs, as_of: date | None, advance: Callable[[int], None],
                       before_count: Callable[[Frames], None] | None = None,
                       after_visits: Callable[[Frames, date], None] | None = None) -> tuple[Frames, date, AuditTables]:
        """Read the logs, count the exposures in DuckDB and the rest as the pandas engine does.

        DuckDB's work runs on worker threads beside Python's (DuckDB releases Python's lock): the
        native path's first pass over the exposure log while the visits are read, then the exposures'
        count while the identity links are read and the visits' tables counted. Each keeps its
        notes and counts apart, so they come out in the order of a one-thread run (notes: visits,
        exposures, links; counts: visits, links, exposures), and errors too (links before exposures).
        `after_visits` is told of the visits (and the as-of day) as soon as they are read,
        `before_count` once the links are too."""
        visits = local_path(inputs.visits, "--visits")
        exposures = local_path(inputs.exposures, "--exposures")
        identities = local_path(inputs.identities, "--identities")
        with ExitStack() as stack:
            stack.enter_context(system_allocator())
            con = stack.enter_context(connect(self.memory_limit, self.temp_directory)) if exposures else None
            native: Future[Native | None] | None = None
            if con is not None and self.native:  # the native path's first pass, beside the visits
                native = _in_worker(stack, prepared, spec.audit.exposures, exposures, con)
            fr = Frames(visits=None)
            used = load_visits(spec, visits, as_of, fr)  # type: ignore[arg-type]
            # the units' table for the join, before the hashing thread starts (it holds Python's lock)
            rec = _recorded_arms(spec, fr)
            units = _visits_table(spec, fr, rec) if rec is not None and exposures is not None else None
            early = engine_pandas.start_visit_arms(spec, fr.visits, contract_arms)
            if after_visits is not None:
                after_visits(fr, used)
            advance(file_bytes(visits))
            ef = Frames(visits=fr.visits.copy(deep=False))  # the exposures' own notes and counts
            counting = None
            if exposures is not None:
                counting = _in_worker(stack, self.leakage, spec, con, exposures, used, ef, early, native, units)
            fi = Frames(visits=fr.visits)  # the links' own notes and counts
            if identities is not None:
                load_identities(spec, identities, used, fi)
            fr.identities = fi.identities
            fr.counts.update(fi.counts)
            if before_count is not None:
                before_count(fr)
            tables = engine_pandas.compute(spec, fr, early)
            tables.leakage = counting.result() if counting is not None else None
        if exposures is not None:
            advance(file_bytes(exposures))
        fr.notes += ef.notes + fi.notes
        fr.counts.update(ef.counts)
        if identities is not None:
            advance(file_bytes(identities))
        return fr, used, tables

    # -- exposures -------------------------------------------------------------------------------

    def leakage(self, spec: Spec, con: Any, path: Path, as_of: date, fr: Frames, early: Future[VisitArms],
                native: Future[Native | None] | None = None, units: pa.Table | None = None) -> LeakageTables:
        """The leakage tables of the exposure log, counted in DuckDB: natively when `native` (the
        prepared native path, `engine_duckdb_native`) holds one, else from the sliced reader.
        `units`: the units' table to join (`_visits_table`), when the recorded arms made it early."""
        import duckdb

        reader = ExposureReader(spec, path, as_of, fr.notes)
        start_us = int(pd.Timestamp(spec.start).value // 1000)
        nat = native.result() if native is not None else None
        con.register("v", units if units is not None else _visits_table(spec, fr, effective_arms(early.result())))
        scan, sums = None, None
        if nat is not None:
            try:
                nat.finish(con, reader)
                scan, sums = nat.count(con, start_us, len(fr.visits))
            except duckdb.OutOfMemoryException as exc:
                raise InputError(_out_of_memory(self.memory_limit, exc)) from None
            except duckdb.Error:  # the sliced reader takes over (and names any problem with the file)
                scan = None
        camps = nat.camps if nat is not None else []
        self.exposure_path = "native" if scan is not None else "sliced"
        if scan is None:
            try:
                scan = self._cells(con, reader, start_us, sorted_mode=True)
            except Unsorted:  # times go back somewhere: read again, DuckDB groups the repeats
                scan = self._cells(con, reader, start_us, sorted_mode=False)
            camps = list(reader.levels)
            sums = sums_of_cells(con)
        assert sums is not None  # the native path's count, or the sliced reader's table
        return _leakage_tables(spec, sums, reader, scan, fr, early.result(), camps)

    def _cells(self, con: Any, reader: ExposureReader, start_us: int, sorted_mode: bool) -> ExposureScan:
        """Stream the log into DuckDB's table `cells` (one pass; sorted mode de-duplicates as it streams)."""
        import duckdb

        scan = ExposureScan()

        ah = Ahead(reader.stream(scan, sorted_mode), scan)
        for i in range(READERS):
            con.register(f"ev{i}", pa.RecordBatchReader.from_batches(STREAM_SCHEMA, ah.reader()))
        con.execute("CREATE OR REPLACE TEMP VIEW ev AS " + " UNION ALL ".join(f"SELECT * FROM ev{i}" for i in range(READERS)))
        events = "ev" if sorted_mode else "evd"
        try:
            con.execute("DROP TABLE IF EXISTS cells")
            if not sorted_mode:  # repeats grouped by DuckDB (spills under the memory limit), then counted
                con.execute("CREATE OR REPLACE TEMP TABLE evd AS SELECT id, t, camp, kl, min(kind) AS kind, "
                            "sum(n) AS n FROM ev GROUP BY id, t, camp, kl")
                day = _floor_div("t", US_DAY)
                scan.days = {int(d): int(c) for d, c in con.execute(
                    f"SELECT {day} AS d, count(*) FROM evd GROUP BY d").fetchall()}
            con.execute(_CELLS_SQL.format(events=events, start=start_us,
                                          week=_floor_div(_floor_div("t", US_DAY) + " + 3", 7)))
        except duckdb.OutOfMemoryException as exc:
            if isinstance(scan.error, (InputError, Unsorted)):
                raise scan.error from None
            raise InputError(_out_of_memory(self.memory_limit, exc)) from None
        except duckdb.Error as exc:
            if scan.error is not None:
                raise scan.error from None
            raise InputError(f"{reader.src.path}: DuckDB could not count the exposures: "
                             f"{str(exc).splitlines()[0]}") from None
        finally:
            ah.close()
            con.execute("DROP VIEW IF EXISTS ev")
            for i in range(READERS):
                con.unregister(f"ev{i}")
        if scan.error is not None:
            raise scan.error
        return scan


_DONE = object()


def _in_worker(stack: ExitStack, fn: Callable[..., Any], *args: Any) -> Future[Any]:
    """`fn(*args)` on a worker thread; the stack waits for it before it closes (the DuckDB connection)."""
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="armlock-duckdb")
    try:
        f = pool.submit(fn, *args)
    finally:
        pool.shutdown(wait=False)
    stack.callback(_settled, f)
    return f


def _settled(f: Future[Any]) -> None:
    """Wait for a worker that uses the DuckDB connection (its own errors are the caller's, or moot)."""
    try:
        f.result()
    except BaseException:  # noqa: BLE001 - an error of the main thread is already on its way
        pass


class Ahead:
    """The slices made on a worker thread, a few ahead, handed to several readers that DuckDB pulls
    from at once (a UNION ALL of them is scanned by as many threads): while DuckDB joins and groups
    slices on every core, the next ones are read (Arrow and numpy release Python's lock). Whichever
    reader asks first gets the next slice, so the rows go through exactly once however DuckDB
    schedules them. An error while reading is kept in `scan.error` and ends the stream (DuckDB
    would lose its type)."""

    def __init__(self, batches: Iterator[pa.RecordBatch], scan: ExposureScan, depth: int = 4) -> None:
        self.q: queue.Queue[Any] = queue.Queue(maxsize=depth)
        self.stop = threading.Event()
        self.batches, self.scan = batches, scan
        self.worker = threading.Thread(target=self._work, name="armlock-exposures", daemon=True)
        self.worker.start()

    def _work(self) -> None:
        try:
            for b in self.batches:
                while not self.stop.is_set():
                    try:
                        self.q.put(b, timeout=0.1)
                        break
                    except queue.Full:
                        continue
                if self.stop.is_set():
                    return
        except BaseException as exc:  # noqa: BLE001 - handed to the caller through scan.error
            self.scan.error = exc
        finally:
            while not self.stop.is_set():
                try:
                    self.q.put(_DONE, timeout=0.1)
                    break
                except queue.Full:
                    continue

    def reader(self) -> Iterator[pa.RecordBatch]:
        while (b := self.q.get()) is not _DONE:
            yield b
        self.q.put(_DONE)  # the end, for the other readers too

    def close(self) -> None:
        self.stop.set()
        while self.worker.is_alive():  # let the worker see the stop and end
            try:
                self.q.get(timeout=0.1)
            except queue.Empty:
                pass
        self.worker.join()


def _out_of_memory(limit: str | None, exc: BaseException) -> str:
    said = f"--memory-limit {limit}" if limit else "DuckDB's default memory limit (80% of this machine's memory)"
    return (f"the DuckDB engine ran out of memory under {said}, even spilling to its temporary folder "
            f"({str(exc).splitlines()[0]}); give it more with --memory-limit, point --temp-dir at a disk with "
            "more room, or run on a cluster with --engine spark")


# One row per exposed unit (pos), per unseen id (uid), and per leaked (unit, campaign code, week):
# rows with no leak have lcamp and lweek NULL. Counts are of distinct events (a row logged n times
# is one event; `copies` sums n). flags of a unit: 1 an exposure during the test, 2 one before it
# (before the start or before the unit's first visit), 4 one before the start, 8 one after the
# start but before the first visit. pre_rows, imps, clks and flags mean nothing for unseen ids.
_CELLS_SQL = """
CREATE TEMP TABLE cells AS
WITH j AS (
  SELECT e.id, e.t, e.camp, e.kind, e.n, v.pos, v.fs, v.hold,
         e.t < {start} AS bs, e.t >= {start} AND e.t >= v.fs AS dur
  FROM {events} e LEFT JOIN v ON e.id = v.id
)
SELECT pos,
       CASE WHEN pos IS NULL THEN id END AS uid,
       CASE WHEN dur AND hold THEN camp END AS lcamp,
       CASE WHEN dur AND hold THEN {week} END AS lweek,
       count(*) AS events,
       sum(n) AS copies,
       sum(CASE WHEN dur THEN 0 ELSE 1 END) AS pre_rows,
       sum(CASE WHEN dur AND kind = 0 THEN 1 ELSE 0 END) AS imps,
       sum(CASE WHEN dur AND kind = 1 THEN 1 ELSE 0 END) AS clks,
       bit_or(CASE WHEN dur THEN 1 ELSE 2 END + CASE WHEN bs THEN 4 WHEN t < fs THEN 8 ELSE 0 END) AS flags,
       min(t) AS t_min
FROM j
GROUP BY 1, 2, 3, 4
"""


def effective_arms(va: VisitArms) -> np.ndarray:
    """Per visits row: the recorded arm when it is a known one, else the arm the spec's hash gives."""
    return np.where(va.rec >= 0, va.rec, va.hashed).astype(np.int64)


def _recorded_arms(spec: Spec, fr: Frames) -> np.ndarray | None:
    """Each unit's effective arm (`effective_arms`) when every unit has a known recorded arm (then
    the exposures are counted while the ids are still being hashed); else None (after the hashing)."""
    rec = _recorded_codes(spec, fr.visits[ARM])[0]
    if len(rec) and bool((rec >= 0).all()):
        return rec.astype(np.int64)
    return None


def _visits_table(spec: Spec, fr: Frames, eff: np.ndarray) -> pa.Table:
    """The units as DuckDB joins them: id, row, first-seen (microseconds), arm and whether it is a holdout."""
    v = fr.visits
    hold = np.isin(eff, [list(spec.arm_names).index(a) for a in spec.holdout_arms])
    fs = v[TIME].array.as_unit("ns").asi8 // 1000
    return pa.table({"id": arrow_ids(v[UNIT]).cast(pa.large_string()), "pos": pa.array(np.arange(len(v), dtype=np.int32)),
                     "fs": pa.array(fs, pa.int64()), "eff": pa.array(eff.astype(np.int8)), "hold": pa.array(hold)})


def _frame(rows: list[tuple], index: list[str], name: str) -> pd.DataFrame:
    return pd.DataFrame([list(r) for r in rows], index=pd.Index(index, name=name, dtype=object),
                        columns=["units", "impressions", "clicks"], dtype="int64")


def sums_of_cells(con: Any) -> CellSums:
    """What the leakage tables need, from DuckDB's table `cells` (`_CELLS_SQL`; small queries, the
    per-unit columns as arrays)."""
    rows, copies, unseen_rows, pre_rows = (int(x or 0) for x in con.execute(
        "SELECT sum(events), sum(copies), sum(events) FILTER (WHERE pos IS NULL), "
        "sum(pre_rows) FILTER (WHERE pos IS NOT NULL) FROM cells").fetchone())
    pu = con.execute("SELECT pos, bit_or(flags) AS f, sum(imps) AS i, sum(clks) AS c FROM cells "
                     "WHERE pos IS NOT NULL GROUP BY pos").fetchnumpy()
    camp = con.execute("SELECT lcamp, count(DISTINCT pos), sum(imps), sum(clks) FROM cells "
                       "WHERE lcamp IS NOT NULL GROUP BY lcamp ORDER BY lcamp").fetchall()
    wk = con.execute("SELECT lweek, count(DISTINCT pos), sum(imps), sum(clks), min(t_min) FROM cells "
                     "WHERE lweek IS NOT NULL GROUP BY lweek ORDER BY lweek").fetchall()
    uids = arrow_of(con.sql("SELECT uid FROM cells WHERE pos IS NULL")).column("uid").combine_chunks()

    def arr(name: str) -> np.ndarray:
        return np.asarray(pu[name], dtype=np.int64)

    return CellSums(rows=rows, copies=copies, unseen_rows=unseen_rows, pre_rows=pre_rows, pos=arr("pos"),
                    flags=arr("f"), imps=arr("i"), clks=arr("c"), by_campaign=[tuple(int(x) for x in r) for r in camp],
                    by_week=[tuple(int(x) for x in r) for r in wk], uids=uids)


def _leakage_tables(spec: Spec, sums: CellSums, reader: ExposureReader, scan: ExposureScan, fr: Frames,
                    va: VisitArms, camps: list[str]) -> LeakageTables:
    """The leakage tables from an exposure log's counts (`camps` names the campaign codes)."""
    arms, k = list(spec.arm_names), len(spec.arms)
    rows, pre_rows, unseen_rows = sums.rows, sums.pre_rows, sums.unseen_rows
    reader.finish(scan, sums.copies - rows + scan.duplicates, fr.notes, fr.counts)
    nv = len(fr.visits)
    eff = effective_arms(va)
    pos, bits = sums.pos, sums.flags

    def flag(bit: int) -> np.ndarray:
        out = np.zeros(nv, dtype=bool)
        out[pos[(bits & bit) != 0]] = True
        return out

    exposed_u, pre_u, bs_u, ba_u = flag(1), flag(2), flag(4), flag(8)
    arm_of = eff[pos]

    def per_arm(col: np.ndarray) -> np.ndarray:  # exact: the float weights are integers below 2**53
        return np.bincount(arm_of, weights=col.astype(np.float64), minlength=k).astype(np.int64)

    by_arm = pd.DataFrame({
        "units": np.bincount(eff, minlength=k),
        "exposed_units": np.bincount(eff[exposed_u], minlength=k),
        "pre_exposed_units": np.bincount(eff[pre_u], minlength=k),
        "impressions": per_arm(sums.imps),
        "clicks": per_arm(sums.clks),
    }, index=pd.Index(arms, name="arm"))
    camp, wk = sums.by_campaign, sums.by_week
    by_campaign = _frame([r[1:] for r in camp], [camps[int(r[0])] for r in camp],
                         "campaign")
    by_week = _frame([r[1:4] for r in wk], [_day((int(r[0]) * 7 - 3) * US_DAY) for r in wk], "week")
    first = _day(min(int(r[4]) for r in wk)) if wk else None
    uniq = pd.Series(sums.uids.to_pandas() if len(sums.uids) else [], dtype="str")
    ua = contract_arms(spec, uniq)
    v = fr.visits
    diag = _unseen_diagnostics(uniq, v[UNIT], arrow_ids(v[UNIT]).combine_chunks())
    return LeakageTables(
        rows=rows, by_arm=by_arm, holdout_by_campaign=by_campaign, holdout_by_week=by_week, holdout_first=first,
        pre_before_start=int(bs_u.sum()), pre_before_assignment=int((ba_u & ~bs_u).sum()),
        pre_rows=pre_rows, unseen_ids=len(uniq), unseen_rows=unseen_rows,
        unseen_by_arm={a: int(n) for a, n in zip(arms, np.bincount(ua, minlength=k))},
        exposed_ids=len(pos) + len(uniq), exposed_rows=exposed_u,
        rows_read=fr.counts.get("exposure_rows", rows), duplicate_rows=fr.counts.get("exposure_duplicate_rows", 0),
        daily_rows={_day(d * US_DAY): c for d, c in sorted(scan.days.items())}, **diag,
    )
