"""The DuckDB engine's native exposure path: DuckDB reads a Parquet exposure log itself, the row rules in SQL.

For the common case, a Parquet log with text ids, zoned timestamps and text labels, sorted by time
as exports usually are, DuckDB's own parallel Parquet reader feeds the join to the units, and
each joined row comes back as a unit's row number and a one-byte code that
`engine_duckdb_dense.Dense` sums per unit (no exposure row becomes a Python value). The rules
are the sliced reader's (`engine_duckdb_read`, itself `shared.load`'s), written in SQL:

- rows with an empty or null id, or a null time, are set aside and counted; the first ones are
  named by their position in the file (`file_row_number`), so the notes are word for word the
  sliced reader's; rows at or after the end of the as-of day are set aside and counted;
- times are whole microseconds, rounded down (nanosecond timestamps are floor-divided);
- an empty or null campaign or kind is the label `(missing)`; kinds that are neither an impression
  nor a click are counted, and when there are any their labels are listed in the sliced reader's
  order by its own code over the kind column alone;
- exact duplicates (same id, time, campaign and kind) count once. Only rows that share a time
  with another row can repeat one, so one pass over the time column alone (Arrow, a row group at a
  time, `time_pass`) finds the times that occur more than once; a row with such a time comes
  back with its time, campaign and kind, and its exact repeats are found among those few rows
  and counted once (`Dense.repeats`).

That pass also checks what SQL would not say the same way. The sliced reader takes over, and
gives the same report, for: CSV and CSV.gz files (text times follow pandas' parsing rules, which SQL
does not copy exactly), ids that are not text (integer ids are hashed as their decimal text and
noted), times that are not zoned timestamps (text, epoch numbers, naive timestamps, dates),
labels that are not text, times outside the years 1678-2261 (an error naming the rows), a log
whose times go back somewhere (its de-duplication groups every row; the sliced reader's does the
same), more rows sharing a time than `TIE_ROWS` or one in `TIE_SHARE` of the rows (say a log in
whole seconds: grouping them would hold most rows in memory, while the sliced reader compares
them as it streams), a file name DuckDB would read as a pattern, and any file DuckDB cannot read
(the sliced reader names the problem).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from armlock.assign.spec_audit import ExposureColumns

from .engine_duckdb_dense import ROWS_SQL, Dense
from .engine_duckdb_read import US_DAY, ExposureReader, ExposureScan
from .read import MISSING_LEVEL, T_MAX_US, T_MIN_US

TIE_ROWS = 1_000_000  # rows sharing a time that DuckDB may group for the duplicates...
TIE_SHARE = 64  # ...or one row in this many, whichever is more; beyond, the sliced reader de-duplicates
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
    """What one pass over the time column found (times in whole microseconds)."""

    nulls: int
    hi: int | None  # the latest time
    tied: np.ndarray  # each time that more than one row has
    days: dict[int, int]  # rows with a time, per day number


def time_pass(ce: ExposureColumns, path: Path, ttype: pa.DataType) -> TimePass | None:
    """The time column, a row group at a time: None when the log goes back in time, lies outside
    1678-2261 or has too many rows sharing a time (the sliced reader takes over)."""
    pf = pq.ParquetFile(path)
    rows = pf.metadata.num_rows
    mul = _UNIT_US.get(ttype.unit, 0)  # 0: nanoseconds
    last: int | None = None
    lo: int | None = None
    nulls = tied_rows = 0
    tied: list[np.ndarray] = []
    days: dict[int, int] = {}
    limit = max(TIE_ROWS, rows // TIE_SHARE)
    for i in range(pf.metadata.num_row_groups):
        col = pf.read_row_group(i, columns=[ce.time]).column(0)
        for chunk in col.chunks:
            raw = chunk.cast(pa.int64())  # the same buffer
            if chunk.null_count:
                nulls += chunk.null_count
                raw = raw.drop_null()
            a = raw.to_numpy()
            if not len(a):
                continue
            if mul > 1 and (a[0] < -(T_MAX_US // mul) or a[-1] > T_MAX_US // mul):
                return None  # beyond the range once scaled (and unsorted logs fail below anyway)
            us = a * mul if mul > 1 else (a if mul == 1 else a // 1000)  # numpy's // rounds down
            if (last is not None and us[0] < last) or bool((us[1:] < us[:-1]).any()):
                return None
            if lo is None:
                lo = int(us[0])
            same = us[1:] == us[:-1]
            if last is not None and us[0] == last:
                tied.append(us[:1])
                tied_rows += 1
            if same.any():
                tv = us[1:][same]
                tied_rows += 2 * len(tv)  # at most
                tied.append(np.unique(tv))
                if tied_rows > limit:
                    return None
            last = int(us[-1])
            d = us // US_DAY
            if len(d):
                first = int(d[0])
                n = np.bincount(d - first)
                for off in np.flatnonzero(n).tolist():
                    days[first + off] = days.get(first + off, 0) + int(n[off])
    if lo is not None and last is not None and (lo < T_MIN_US or last >= T_MAX_US):
        return None
    ties = np.unique(np.concatenate(tied)) if tied else np.zeros(0, np.int64)
    return TimePass(nulls=nulls, hi=last, tied=ties, days=days)


class Native:
    """The native path over one exposure log. `prepare` (on a worker thread, while the visits are
    read: it needs neither the units nor the as-of day) counts the rows with no id or no time and
    the kinds that are neither, and keeps the times more than one row has (`tied_t`); `finish` applies the
    as-of day; `cells` registers DuckDB's table `cells` as `engine_duckdb._CELLS_SQL` makes it (campaign
    codes index `camps`, this log's labels in sorted order)."""

    def __init__(self, ce: ExposureColumns, path: Path, ttype: pa.DataType, tp: TimePass) -> None:
        self.ce, self.path, self.tp = ce, path, tp
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
        self.has_ties = False

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
        missing = values[words.index(MISSING_LEVEL)] if MISSING_LEVEL in words else "NULL"
        arms = " ".join(f"WHEN {_text(w)} THEN {v}" for w, v in zip(words, values))
        return f"coalesce(CASE {col} WHEN '' THEN {missing} {arms} END, {missing})"

    def _kind_class(self, col: str) -> str:
        return self._code(col, self.kinds, self.classes)

    def prepare(self, con: Any) -> None:
        """What needs neither the units nor the as-of day: rows with no id or no time (Parquet's
        statistics answer these at once when there are none), kinds that are neither, repeats."""
        scan, tp = self.scan, self.tp
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
        if tp.nulls:
            n, first = con.execute(f"SELECT count(*), min(r, 5) FROM xs WHERE traw IS NULL AND NOT {NO_ID}").fetchall()[0]
            if n:
                scan.no_time.first, scan.no_time.n = [int(x) for x in first], int(n)
            self.kept.append("traw IS NOT NULL")
        self.others = int(con.execute(f"SELECT count(*) FROM xs WHERE {self._kind_class('kl')} = 2").fetchall()[0][0])
        if len(tp.tied):  # compared with the column as stored (no conversion per row), except nanoseconds
            ties = pa.array(tp.tied, pa.int64())
            con.execute("CREATE OR REPLACE TEMP TABLE tied_t (t {})".format("BIGINT" if self.ns else "TIMESTAMPTZ"))
            con.register("tied_in", pa.table({"t": ties if self.ns else ties.cast(pa.timestamp("us", "UTC"))}))
            con.execute("INSERT INTO tied_t SELECT t FROM tied_in").fetchall()
            con.unregister("tied_in")
            self.has_ties = True

    def _kept(self) -> str:
        return " AND ".join(self.kept) or "TRUE"

    def finish(self, con: Any, reader: ExposureReader) -> None:
        """The as-of day: rows at or after its end set aside, the rows per day, the kinds' labels."""
        scan, tp, cut = self.scan, self.tp, reader.cut_us
        end = cut // US_DAY  # the cut is a midnight: a row is kept when its day is before this one
        days = {d: n - self.empty_days.get(d, 0) for d, n in tp.days.items() if d < end}
        if tp.hi is not None and tp.hi >= cut:
            scan.late = int(con.execute(f"SELECT count(*) FROM xs WHERE t >= {cut} AND NOT {NO_ID}").fetchall()[0][0])
            self.kept.append(f"t < {cut}")
        self.days = days
        if self.others:  # the labels in the sliced reader's order, by its own code over the kind column
            for batch in reader.slices([reader.ce.kind]):
                reader.kinds(batch.column(0), scan)

    def cells(self, con: Any, start_us: int, units: int) -> ExposureScan:
        """DuckDB's table `cells` from the log (the units' table `v` registered); the scan's counts.

        DuckDB joins the rows to the units and streams them back; `Dense` sums them per unit. A row
        whose time another row shares comes back with its time, campaign and kind, so exact
        repeats are found among those few and counted once."""
        tied = "LEFT JOIN tied_t tt ON e.{} = tt.t".format("t" if self.ns else "traw") if self.has_ties else ""
        sql = ROWS_SQL.format(
            kept=self._kept(), start=start_us, kind=self._kind_class("kl"), tied=tied,
            camp=self._code("camp", self.camps, list(range(len(self.camps)))),
            tie="tt.t IS NOT NULL" if tied else "false", kl=self._code("kl", self.kinds, list(range(len(self.kinds)))))
        dense = Dense(units)
        # batches of about as many rows as units (each bincount walks the units' arrays once), within
        # 1-4 M rows (a batch, about 20 bytes a row, is held while it is summed)
        for batch in con.sql(sql).to_arrow_reader(max(BATCH_ROWS, min(units, 1 << 22))):
            dense.add(batch)
        self.scan.duplicates = dense.repeats(self.days)
        self.scan.days = {d: n for d, n in self.days.items() if n}
        con.register("cells", dense.cells())
        return self.scan


def prepared(ce: ExposureColumns, path: Path, con: Any) -> Native | None:
    """`Native.prepare` of the log when it can take the native path; None for the sliced reader
    (including when DuckDB cannot read the file: the sliced reader names the problem)."""
    import duckdb

    ttype = eligible(ce, path)
    if ttype is None:
        return None
    try:
        tp = time_pass(ce, path, ttype)
        if tp is None:
            return None
        native = Native(ce, path, ttype, tp)
        native.prepare(con)
    except (duckdb.Error, pa.ArrowException, OSError, TooMany):
        return None
    return native


NO_ID = "(id IS NULL OR id = '')"
BATCH_ROWS = 1 << 20  # rows per batch DuckDB hands back (more when there are more units, up to 4 M)
MAX_LABELS = 1000  # campaign or kind labels the SQL maps to codes; more go to the sliced reader


class TooMany(Exception):
    """More labels than `MAX_LABELS` (internal signal: the sliced reader takes over)."""
