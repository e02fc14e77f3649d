"""The DuckDB engine's native exposure path: DuckDB reads a Parquet exposure log itself, the row rules in SQL.

For the common case, a Parquet log with text ids, zoned timestamps and text labels, sorted by time
as exports usually are, DuckDB's own parallel Parquet reader feeds the join to the units, and
each joined row comes back as a unit's row number and a one-byte code that
`engine_duckdb_dense.Dense` sums per unit (no exposure row becomes a Python value). (Grouping the
rows by id first, before the units are known, took the same CPU at 2 M units but its partial
groups grew with the rows: 4.5 GB at 250 M rows and 6.3 GB at 500 M, 10 M units; the join's
memory does not.)

The rules are the sliced reader's (`engine_duckdb_read`, itself `shared.load`'s), written in SQL:

- rows with an empty or null id, or a null time, are set aside and counted; the first ones are
  named by their position in the file (`file_row_number`), so the notes are word for word the
  sliced reader's; rows at or after the end of the as-of day are set aside and counted;
- times are whole microseconds, rounded down (nanosecond timestamps are floor-divided);
- an empty or null campaign or kind is the label `(missing)`; kinds that are neither an impression
  nor a click are counted, and when there are any their labels are listed in the sliced reader's
  order by its own code over the kind column alone;
- exact duplicates (same id, time, campaign and kind) count once. Only rows that share a time
  can repeat each other, and in a log sorted by time they sit together. A pass over the log's
  times a row group at a time (Arrow, `time_pass`, on a thread beside DuckDB's checks) finds the
  times rows share; the joined query marks those rows and `Dense` compares them, taking every
  exact repeat off. Past `TIE_ROWS` such rows the pass reads id, campaign and kind too and keeps
  each exact repeat itself; they go through the joined query after the log and are taken off.

That pass also checks what SQL would not say the same way. The sliced reader takes over, and
gives the same report, for: CSV and CSV.gz files (text times follow pandas' parsing rules, which SQL
does not copy exactly), ids that are not text (integer ids are hashed as their decimal text and
noted), times that are not zoned timestamps (text, epoch numbers, naive timestamps, dates),
labels that are not text, times outside the years 1678-2261 (an error naming the rows), a log
whose times go back somewhere (its de-duplication groups every row; the sliced reader's does the
same), more exact repeats than `REPEAT_ROWS` or one in `REPEAT_SHARE` of the rows (they are held
until they are taken off, while the sliced reader drops them as it streams), a file name DuckDB
would read as a pattern, and any file DuckDB cannot read (the sliced reader names the problem).
"""

from __future__ import annotations

from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from armlock.assign.spec_audit import ExposureColumns

from .engine_duckdb_dense import NUM_SQL, ROWS_SQL, CellSums, Dense
from .engine_duckdb_read import US_DAY, ExposureReader, ExposureScan
from .keys import duplicate_rows
from .read import MISSING_LEVEL, T_MAX_US, T_MIN_US

TIE_ROWS = 2_000_000  # rows sharing a time that the joined query marks for `Dense` to compare (held until then)
REPEAT_ROWS = 1_000_000  # exact repeats the native path takes off (held in memory until then)...
REPEAT_SHARE = 16  # ...or one row in this many, whichever is more; beyond, the sliced reader de-duplicates
_UNIT_US = {"s": 10**6, "ms": 1000, "us": 1}  # coarser units to microseconds (ns is divided by 1000)


def _name(col: str) -> str:
    return '"' + col.replace('"', '""') + '"'


def _text(s: str) -> str:
    return "'" + s.replace("'", "''") + "'"


def floor_div(expr: str, d: int) -> str:
    """Floor division of an integer expression in SQL (DuckDB's % keeps the dividend's sign)."""
    return f"(({expr}) - ((({expr}) % {d}) + {d}) % {d}) // {d}"


def _is_text(t: pa.DataType) -> bool:
    if pa.types.is_dictionary(t):
        t = t.value_type
    return pa.types.is_string(t) or pa.types.is_large_string(t)


def eligible(ce: ExposureColumns, path: Path) -> pa.DataType | None:
    """The time column's type when the log can take the native path (see the module's text), else None."""
    if not path.name.lower().endswith((".parquet", ".pq")) or any(ch in str(path) for ch in "*?[]{}"):
        return None
    try:
        schema = pq.read_schema(path)
        names = schema.names
        cols = (ce.unit_id, ce.time, ce.campaign, ce.kind)
        if any(names.count(c) != 1 for c in cols):
            return None  # missing or ambiguous: the reader says so
        ttype = schema.field(ce.time).type
    except (pa.ArrowException, OSError, KeyError):
        return None
    if not (pa.types.is_timestamp(ttype) and ttype.tz is not None):
        return None
    if not all(_is_text(schema.field(c).type) for c in (ce.unit_id, ce.campaign, ce.kind)):
        return None
    return ttype


@dataclass
class TimePass:
    """What one pass over the log found (times in whole microseconds)."""

    repeats: pa.Table  # one row per exact repeat of an earlier row: id, t, camp, kl (as in the file)
    days: dict[int, int]  # rows with a time, per day number
    ties: np.ndarray | None = None  # the times more than one row shares (sorted), when `repeats` was not looked for
    lo: int | None = None  # the first and last time (None: no row has one)
    hi: int | None = None


def time_pass(ce: ExposureColumns, path: Path, ttype: pa.DataType) -> TimePass | None:
    """The log a row group at a time (Arrow): the times checked and counted per day, and the times
    that rows share. None when the log goes back in time or lies outside 1678-2261 (the sliced
    reader takes over).

    Only rows that share a time can repeat each other. When at most `TIE_ROWS` rows share one,
    the pass reads the time column alone and hands on those times (`TimePass.ties`): the joined
    query marks their rows, and `Dense` compares them. When more do (times in whole seconds or
    milliseconds of a large log), it reads the log again, id, campaign and kind too, and finds the
    repeats itself (`_repeats_pass`), a row group at a time."""
    pf = pq.ParquetFile(path)
    found = _ties_pass(pf, ce, ttype)
    if found is None or isinstance(found, TimePass):
        return found
    return _repeats_pass(pf, ce, ttype)


class _Groups:
    """The log's row groups in order (the columns `cols`, rows with no time left out: `Native.prepare`
    counts them), each with its times in whole microseconds, checked and counted per day. `last`
    is the time the groups so far ended on while the next one is handed out; `bad` is set, and the
    walk stops, when the times go back or lie beyond the range once scaled."""

    def __init__(self, pf: pq.ParquetFile, ce: ExposureColumns, ttype: pa.DataType, cols: list[str]) -> None:
        self.pf, self.col, self.cols = pf, ce.time, cols
        self.mul = _UNIT_US.get(ttype.unit, 0)  # 0: nanoseconds
        self.lo: int | None = None
        self.last: int | None = None
        self.days: dict[int, int] = {}
        self.bad = False

    def __iter__(self) -> Iterator[tuple[pa.Table, np.ndarray]]:
        mul = self.mul
        for i in range(self.pf.metadata.num_row_groups):
            group = self.pf.read_row_group(i, columns=self.cols)
            tcol = group.column(self.col)
            if tcol.null_count:
                group = group.filter(tcol.is_valid())
                tcol = group.column(self.col)
            if not len(tcol):
                continue
            a = np.concatenate([c.cast(pa.int64()).to_numpy() for c in tcol.chunks])  # the same buffers
            if mul > 1 and (a[0] < -(T_MAX_US // mul) or a[-1] > T_MAX_US // mul):
                self.bad = True  # beyond the range once scaled (and unsorted logs fail below anyway)
                return
            us = a * mul if mul > 1 else (a if mul == 1 else a // 1000)  # numpy's // rounds down
            if (self.last is not None and us[0] < self.last) or bool((us[1:] < us[:-1]).any()):
                self.bad = True
                return
            if self.lo is None:
                self.lo = int(us[0])
            _count_days(us, self.days)
            yield group, us
            self.last = int(us[-1])

    def in_range(self) -> bool:
        """The walk ended with every time checked and within 1678-2261."""
        return not self.bad and (self.lo is None or self.last is None or T_MIN_US <= self.lo <= self.last < T_MAX_US)


def _count_days(us: np.ndarray, days: dict[int, int]) -> None:
    """Add a row group's rows per day (its times sorted: the days' ends found by bisection)."""
    first, last = int(us[0]) // US_DAY, int(us[-1]) // US_DAY  # Python's // rounds down
    ends = np.searchsorted(us, np.arange(first + 1, last + 2, dtype=np.int64) * US_DAY, side="left")
    n = np.diff(ends, prepend=0)
    for off in np.flatnonzero(n).tolist():
        days[first + off] = days.get(first + off, 0) + int(n[off])


class _Many:
    """More rows share a time than `TIE_ROWS` (internal signal)."""


def _ties_pass(pf: pq.ParquetFile, ce: ExposureColumns, ttype: pa.DataType) -> TimePass | _Many | None:
    """The time column alone: days, checks, and the times more than one row shares."""
    walk = _Groups(pf, ce, ttype, [ce.time])
    ties: list[np.ndarray] = []
    tie_rows = 0
    for _, us in walk:
        same = us[1:] == us[:-1]
        if walk.last is not None and int(us[0]) == walk.last:  # the last group's last time goes on
            ties.append(us[:1])
            tie_rows += 2
        if same.any():
            shared = us[1:][same]
            ties.append(shared)
            tie_rows += 2 * len(shared)  # at most: each row after the first of its time, and that first
        if tie_rows > TIE_ROWS:
            return _Many()
    if not walk.in_range():
        return None
    shared_times = np.unique(np.concatenate(ties)) if ties else np.zeros(0, np.int64)
    pa.default_memory_pool().release_unused()  # as `_repeats_pass` does, the row groups' freed buffers
    return TimePass(repeats=_REPEATS_SCHEMA.empty_table(), days=walk.days, ties=shared_times, lo=walk.lo,
                    hi=walk.last)


def _repeats_pass(pf: pq.ParquetFile, ce: ExposureColumns, ttype: pa.DataType) -> TimePass | None:
    """The whole log, a row group at a time: the times checked and counted per day, and the exact
    repeats found. None when the log goes back in time, lies outside 1678-2261 or repeats more
    rows than `REPEAT_ROWS` or one in `REPEAT_SHARE` (the sliced reader takes over).

    In a log sorted by time, rows that share a time sit together: each group's rows that share a
    time with a neighbour are compared on integer codes of their id, campaign and kind
    (`keys.duplicate_rows`), and the run of the group's last time waits for the next group, where
    it may go on."""
    walk = _Groups(pf, ce, ttype, [ce.unit_id, ce.time, ce.campaign, ce.kind])
    found_parts: list[pa.Table] = []
    carry: pa.Table | None = None  # the rows of the last time so far, not yet compared
    limit = max(REPEAT_ROWS, pf.metadata.num_rows // REPEAT_SHARE)
    for group, us in walk:
        last = walk.last
        # the rows that share a time with a neighbour, and the run of the last time (it may go on)
        same = us[1:] == us[:-1]
        tail = int(np.searchsorted(us, us[-1], side="left"))
        near = np.zeros(len(us), bool)
        near[:-1] |= same
        near[1:] |= same
        near[tail:] = True
        if last is not None and int(us[0]) == last:  # the run of the last group's last time goes on here
            near[:int(np.searchsorted(us, us[0], side="right"))] = True
        pick = np.flatnonzero(near)
        cand = pa.table([group.column(ce.unit_id).take(pick), pa.array(us[pick]), group.column(ce.campaign).take(pick),
                         group.column(ce.kind).take(pick)], names=["id", "t", "camp", "kl"])
        cand = _plain(cand)
        if carry is not None:
            if int(us[0]) != last:
                _keep(found_parts, _repeats(carry))  # the last run did not go on
            else:
                cand = pa.concat_tables([carry, cand])
        t = cand.column("t").to_numpy()
        cut = int(np.searchsorted(t, us[-1], side="left"))
        carry = cand.slice(cut)
        if cut:
            _keep(found_parts, _repeats(cand.slice(0, cut)))
        if sum(p.num_rows for p in found_parts) > limit:
            return None
    if carry is not None:
        _keep(found_parts, _repeats(carry))
    if not walk.in_range():
        return None
    reps = pa.concat_tables(found_parts) if found_parts else _REPEATS_SCHEMA.empty_table()
    if reps.num_rows > limit:
        return None
    # hand the row groups' freed buffers back now: Arrow's allocator keeps them for a while, and the
    # count that follows would stack its own peak on them (measured: +60-100 MB at 200,000 units
    # and 4 M rows, 1.15-1.23x the 2 M-row peak instead of 1.04-1.14x)
    pa.default_memory_pool().release_unused()
    return TimePass(repeats=reps, days=walk.days, lo=walk.lo, hi=walk.last)


_REPEATS_SCHEMA = pa.schema([("id", pa.string()), ("t", pa.int64()), ("camp", pa.string()), ("kl", pa.string())])


def _keep(parts: list[pa.Table], found: pa.Table) -> None:
    """Keep a row group's repeats (none: nothing kept, so no buffer of the group outlives it)."""
    if found.num_rows:
        parts.append(found)


def _plain(t: pa.Table) -> pa.Table:
    """Candidate rows with plain text columns (dictionaries decoded; large text as text)."""
    out = []
    for name in t.column_names:
        c = t.column(name).combine_chunks()
        if pa.types.is_dictionary(c.type):
            c = c.dictionary_decode()
        out.append(c.cast(_REPEATS_SCHEMA.field(name).type))
    return pa.table(out, schema=_REPEATS_SCHEMA)


def _repeats(rows: pa.Table) -> pa.Table:
    """The rows (sorted by time) that repeat an earlier one exactly: same id, time, campaign and kind,
    an empty label being the same as a missing one (both are `(missing)`)."""
    if rows.num_rows < 2:
        return _REPEATS_SCHEMA.empty_table()  # not an empty slice: it would hold the rows' buffers
    t = rows.column("t").to_numpy()
    if not bool((t[1:] == t[:-1]).any()):
        return _REPEATS_SCHEMA.empty_table()

    def code(name: str, blank: bool) -> np.ndarray:
        c = rows.column(name)
        if blank:
            c = pc.fill_null(c, "")
        enc = pc.dictionary_encode(c).combine_chunks()
        return pc.fill_null(enc.indices, -1).to_numpy(zero_copy_only=False).astype(np.int64)

    dup = duplicate_rows(t, code("id", False), code("camp", True), code("kl", True))
    if not dup.any():
        return _REPEATS_SCHEMA.empty_table()
    return rows.filter(pa.array(dup)).combine_chunks()  # its own buffers, not the row group's


class Native:
    """The native path over one exposure log. `prepare` (on a worker thread, while the visits are
    read: it needs neither the units nor the as-of day) counts the rows with no id or no time and
    the kinds that are neither; `attach` takes the time pass's findings; `finish` applies the as-of
    day; `count` counts the rows per unit and leaked cell (campaign codes index `camps`, this log's
    labels in sorted order)."""

    def __init__(self, ce: ExposureColumns, path: Path, ttype: pa.DataType) -> None:
        self.ce, self.path = ce, path
        self.tp = TimePass(repeats=_REPEATS_SCHEMA.empty_table(), days={})  # `attach`
        self.ns = ttype.unit == "ns"
        t = _name(ce.time)
        self.t_expr = floor_div(f"epoch_ns({t})", 1000) if self.ns else f"epoch_us({t})"
        self.source = (f"SELECT {_name(ce.unit_id)} AS id, {self.t_expr} AS t, {t} AS traw, {_name(ce.campaign)} AS camp, "
                       f"{_name(ce.kind)} AS kl, file_row_number AS r FROM read_parquet({_text(str(path))}, "
                       "file_row_number = true)")
        self.imp, self.clk = set(ce.impression_values), set(ce.click_values)
        self.camps: list[str] = []  # campaign labels, in the order of their codes
        self.kinds: list[str] = []  # kind labels, likewise
        self.scan = ExposureScan(rows=pq.ParquetFile(path).metadata.num_rows)
        self.kept: list[str] = []
        self.empty_days: dict[int, int] = {}
        self.others = 0
        self.lo: int | None = None  # the first and last time (`attach`, from the time pass)
        self.hi: int | None = None

    @staticmethod
    def _labels(con: Any, col: str) -> list[str] | None:
        """A label column's labels (an empty or null value is MISSING_LEVEL), or None when there are
        more than `MAX_LABELS` (the sliced reader takes over)."""
        found = con.execute(f"SELECT DISTINCT {col} FROM xs LIMIT {MAX_LABELS + 2}").fetchall()
        words = list(dict.fromkeys(MISSING_LEVEL if w is None or w == "" else str(w) for (w,) in found))
        return sorted(words) if len(words) <= MAX_LABELS else None

    @staticmethod
    def _code(col: str, words: list[str], values: list[int]) -> str:
        """SQL giving each row of a label column the value of its label (`values[i]` for `words[i]`)."""
        arms = " ".join(f"WHEN {_text(w)} THEN {v}" for w, v in zip(words, values))
        if MISSING_LEVEL not in words:  # no empty or null label in the log: the plain CASE is cheaper
            return f"CASE {col} {arms} END"
        missing = values[words.index(MISSING_LEVEL)]
        return f"coalesce(CASE {col} WHEN '' THEN {missing} {arms} END, {missing})"

    def _kind_class(self, col: str) -> str:
        return self._code(col, self.kinds, self.classes)

    def prepare(self, con: Any) -> None:
        """What needs neither the units nor the as-of day: rows with no id or no time (Parquet's
        statistics answer these at once when there are none), kinds that are neither."""
        scan = self.scan
        con.execute(f"CREATE OR REPLACE TEMP VIEW xs AS {self.source}").fetchall()
        camps, kinds = self._labels(con, "camp"), self._labels(con, "kl")
        if camps is None or kinds is None:
            raise TooMany()
        self.camps, self.kinds = camps, kinds
        self.classes = [0 if w in self.imp else 1 if w in self.clk else 2 for w in kinds]  # the reader's rule
        n, first = con.execute(f"SELECT count(*), min(r, 5) FROM xs WHERE {NO_ID}").fetchall()[0]
        if n:
            scan.empty.first, scan.empty.n = [int(x) for x in first], int(n)
            self.kept.append(f"NOT {NO_ID}")
            self.empty_days = {int(d): int(c) for d, c in con.execute(
                f"SELECT {floor_div('t', US_DAY)}, count(*) FROM xs WHERE {NO_ID} AND t IS NOT NULL GROUP BY 1").fetchall()}
        nulls, n, first = con.execute(f"SELECT count(*), count(*) FILTER (WHERE NOT {NO_ID}), "
                                      f"min(r, 5) FILTER (WHERE NOT {NO_ID}) FROM xs WHERE traw IS NULL").fetchall()[0]
        if nulls:
            if n:
                scan.no_time.first, scan.no_time.n = [int(x) for x in first], int(n)
            self.kept.append("traw IS NOT NULL")
        self.others = int(con.execute(f"SELECT count(*) FROM xs WHERE {self._kind_class('kl')} = 2").fetchall()[0][0])

    def attach(self, con: Any, tp: TimePass) -> None:
        """The time pass's findings (it ran beside `prepare`): the times rows share, or the repeats,
        as rows of the log."""
        self.tp = tp
        self.lo, self.hi = tp.lo, tp.hi
        if self.lo is not None and self.hi is not None:
            if (self.hi - self.lo + 1) * max(len(self.camps), 1) * max(len(self.kinds), 1) >= 1 << 62:
                raise TooMany()  # a row's time, campaign and kind would not fit one number (`ROWS_SQL`)
        if tp.ties is not None and len(tp.ties):
            con.register("ties", pa.table({"t": pa.array(tp.ties, pa.int64())}))
        if tp.repeats.num_rows:
            con.register("reps_in", tp.repeats)
            con.execute("CREATE OR REPLACE TEMP VIEW reps AS SELECT id, t, t AS traw, camp, kl, 0 AS r FROM reps_in").fetchall()

    def _kept(self) -> str:
        return " AND ".join(self.kept) or "TRUE"

    def finish(self, con: Any, reader: ExposureReader) -> None:
        """The as-of day: rows at or after its end set aside, the rows per day, the kinds' labels."""
        scan, tp, cut = self.scan, self.tp, reader.cut_us
        end = cut // US_DAY  # the cut is a midnight: a row is kept when its day is before this one
        days = {d: n - self.empty_days.get(d, 0) for d, n in tp.days.items() if d < end}
        if self.hi is not None and self.hi >= cut:
            scan.late = int(con.execute(f"SELECT count(*) FROM xs WHERE t >= {cut} AND NOT {NO_ID}").fetchall()[0][0])
            self.kept.append(f"t < {cut}")
        self.days = days
        if self.others:  # the labels in the sliced reader's order, by its own code over the kind column
            for batch in reader.slices([reader.ce.kind]):
                reader.kinds(batch.column(0), scan)

    def count(self, con: Any, start_us: int, units: int) -> tuple[ExposureScan, CellSums]:
        """The log's counts per unit and leaked cell (the units' table `v` registered); the scan's counts.

        DuckDB joins the kept rows to the units (`ROWS_SQL`) and streams them back; `Dense` sums
        them per unit. The rows sharing a time are marked and compared by `Dense`; or the exact
        repeats found by `time_pass` go through the same joined query after them and are taken off."""
        fields = {"start": start_us, "kind": self._kind_class("kl"), "t0": self.lo or 0,
                  "camps": max(len(self.camps), 1), "kinds": max(len(self.kinds), 1),
                  "camp": self._code("camp", self.camps, list(range(len(self.camps)))),
                  "klabel": self._code("kl", self.kinds, list(range(len(self.kinds))))}
        ties = self.tp.ties
        dense = Dense(units, len(self.camps), self.lo or 0, len(self.kinds), ties)
        kept = self._kept()
        tie = "t IN (SELECT t FROM ties)" if ties is not None and len(ties) else "false"

        def rows(source: str, marked: str) -> str:
            return ROWS_SQL.format(rows=f"SELECT id, t, camp, kl, {marked} AS tie FROM {source} WHERE {kept}",
                                   num=NUM_SQL.format(**fields), **fields)

        # batches of about as many rows as units (each sum walks the units' arrays once), within 1-4 M
        # rows (~10 bytes a row, held while it is summed)
        for batch in con.sql(rows("xs", tie)).to_arrow_reader(max(BATCH_ROWS, min(units, 1 << 22))):
            dense.add(batch)
        if self.tp.repeats.num_rows:  # the repeats found by the time pass, taken off
            for batch in con.sql(rows("reps", "false")).to_arrow_reader(BATCH_ROWS):
                dense.add(batch, -1)
            day = floor_div("t", US_DAY)
            for d, c in con.execute(f"SELECT {day}, count(*) FROM reps WHERE {kept} GROUP BY 1").fetchall():
                self.days[int(d)] = self.days.get(int(d), 0) - int(c)
                self.scan.duplicates += int(c)
        if ties is not None:  # the marked rows that repeat another exactly, taken off
            taken = dense.take_off_repeats()
            if len(taken):
                d, c = np.unique(taken // US_DAY, return_counts=True)  # numpy's // rounds down
                for day, k in zip(d.tolist(), c.tolist()):
                    self.days[day] = self.days.get(day, 0) - k
                self.scan.duplicates += len(taken)
        self.scan.days = {d: c for d, c in self.days.items() if c}
        return self.scan, dense.sums()


def prepared(ce: ExposureColumns, path: Path, con: Any) -> Native | None:
    """`Native.prepare` of the log, beside its time pass, when it can take the native path; None
    for the sliced reader (including when DuckDB cannot read the file: the sliced reader names the
    problem)."""
    import duckdb

    ttype = eligible(ce, path)
    if ttype is None:
        return None
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="armlock-timepass") as pool:
        # the time pass (Arrow and numpy, on a thread) beside DuckDB's checks: neither needs the other
        passing = pool.submit(time_pass, ce, path, ttype)
        try:
            native = Native(ce, path, ttype)
            native.prepare(con)
            tp = passing.result()
            if tp is None:
                return None
            native.attach(con, tp)
        except (duckdb.Error, pa.ArrowException, OSError, TooMany):
            return None
    return native


NO_ID = "(id IS NULL OR id = '')"

BATCH_ROWS = 1 << 20  # rows per batch DuckDB hands back (more when there are more units, up to 4 M)
MAX_LABELS = 1000  # campaign or kind labels the SQL maps to codes; more go to the sliced reader


class TooMany(Exception):
    """More labels than `MAX_LABELS` (internal signal: the sliced reader takes over)."""
