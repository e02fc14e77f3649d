"""The DuckDB engine's exposure reader: the log in slices, each through `audit.load`'s row rules, streamed to DuckDB.

No slice outlives its turn, so memory does not grow with the rows. Every rule is the pandas
reader's own code applied slice by slice (`read.text_ids`, `read.parse_times`, the labels of
`read.read_labels`), and what must be counted over the whole file (times that do not parse or lie
outside 1678-2261, empty ids, rows after the as-of day, kinds that are neither impression nor
click) is summed across slices, so the notes and the error texts are word for word those of
`audit.load.load_exposures`.

Exact duplicates (same id, time, campaign and kind) are counted once. A log sorted by time (the
usual export) is de-duplicated as it streams: a row can only repeat one with the same time, so
only runs of equal times are compared, and the run at a slice's end waits for the next slice.
A log that is not sorted is read again in `hash` mode, and DuckDB groups the rows instead (its
hash aggregate spills to the temporary folder under the memory limit).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from armlock.assign import InputError, Spec

from .load import cutoff_of
from .read import (
    MISSING_LEVEL,
    SHOW_ROWS,
    _READ_ERRORS,
    ParsedTimes,
    Source,
    _header,
    _need,
    _no_duplicates,
    _scalar_only,
    _why,
    bad_times,
    far_times,
    numeric_times_error,
    parse_times,
    text_ids,
    time_notes,
)

BATCH_ROWS = 1 << 20  # rows per Parquet slice: a few tens of MB of Arrow buffers at a time
CSV_BLOCK = 1 << 24  # bytes per CSV slice (as the pandas reader's blocks)
KINDS = ("impression", "click", "other")
STREAM_SCHEMA = pa.schema([("id", pa.string()), ("t", pa.int64()), ("camp", pa.string()), ("kl", pa.string()),
                           ("kind", pa.int8()), ("n", pa.int64())])


class Unsorted(Exception):
    """The log's times go back somewhere: de-duplicate by hash instead (internal signal)."""


@dataclass
class _Rows:
    """The first row positions of a kind (for messages) and how many there are."""

    first: list[int] = field(default_factory=list)
    n: int = 0

    def add(self, local: np.ndarray, base: int) -> None:
        if len(local):
            if len(self.first) < SHOW_ROWS:
                self.first += [int(i) + base for i in local[:SHOW_ROWS - len(self.first)]]
            self.n += len(local)


@dataclass
class ExposureScan:
    """What one pass over the exposure log found, besides the rows it streamed."""

    rows: int = 0
    id_notes: list[str] = field(default_factory=list)
    empty: _Rows = field(default_factory=_Rows)
    no_time: _Rows = field(default_factory=_Rows)
    late: int = 0
    other: int = 0
    other_levels: dict[str, None] = field(default_factory=dict)
    bad: _Rows = field(default_factory=_Rows)
    shown: list[str] = field(default_factory=list)
    far: _Rows = field(default_factory=_Rows)
    far_first: object = None
    flags: ParsedTimes | None = None  # the notes' flags, summed over the slices
    error: BaseException | None = None  # an error raised while DuckDB pulled the rows


def labels(arr: pa.Array | pa.ChunkedArray) -> pa.Array | pa.ChunkedArray:
    """`read.read_labels`' levels as text: empty or null is MISSING_LEVEL, other types their text."""
    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(arr.type.value_type)
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        arr = arr.cast(pa.string())
    arr = pc.fill_null(arr, "")
    return pc.if_else(pc.equal(arr, ""), MISSING_LEVEL, arr).cast(pa.string())


class ExposureReader:
    """The exposure log of a spec, checked like `read.read_mapped` and read in slices."""

    def __init__(self, spec: Spec, path: Path, as_of: date, notes: list[str]) -> None:
        ce = spec.audit.exposures
        self.ce, self.as_of = ce, as_of
        self.src = Source(Path(path), "exposures")
        present = _header(self.src, ce.delimiter, notes)
        wanted = {"unit_id": ce.unit_id, "time": ce.time, "campaign": ce.campaign, "kind": ce.kind}
        _need(self.src, present, wanted, "[audit.exposures]", ce.delimiter)
        _no_duplicates(self.src, present, wanted, "[audit.exposures]")
        self.wanted = wanted
        self.columns = list(dict.fromkeys(wanted.values()))
        self.cut_us = cutoff_of(as_of).value // 1000
        self.imp, self.clk = set(ce.impression_values), set(ce.click_values)

    def _slices(self) -> Iterator[pa.RecordBatch]:
        src = self.src
        try:
            if src.is_csv:
                opts = pacsv.ConvertOptions(include_columns=self.columns,
                                            column_types={c: pa.string() for c in self.columns},
                                            strings_can_be_null=False)
                reader = pacsv.open_csv(src.path, read_options=pacsv.ReadOptions(block_size=CSV_BLOCK),
                                        parse_options=pacsv.ParseOptions(delimiter=self.ce.delimiter),
                                        convert_options=opts)
                first = True
                for batch in reader:
                    if first:
                        _scalar_only(src, batch.schema.empty_table(), self.wanted, "[audit.exposures]")
                        first = False
                    yield batch
            else:
                pf = pq.ParquetFile(src.path)
                _scalar_only(src, pf.schema_arrow.empty_table(), self.wanted, "[audit.exposures]")
                yield from pf.iter_batches(batch_size=BATCH_ROWS, columns=self.columns)
        except _READ_ERRORS as exc:
            raise InputError(f"{src.path}: cannot read the {src.role} file: {_why(exc)}") from None

    def _first_number(self, col: str) -> object:
        for batch in self._slices():
            vals = pc.drop_null(batch.column(col))
            if len(vals):
                return vals[0].as_py()
        return None

    def stream(self, scan: ExposureScan, sorted_mode: bool) -> Iterator[pa.RecordBatch]:
        """The kept rows (id, t in microseconds, campaign, kind label, kind code, copies n), slice by slice.

        Raises `Unsorted` in sorted mode when a time goes back. Problems that need the whole file
        (times that do not parse or are out of range) are counted in `scan`; rows stop flowing once
        one is found, and `finish` raises it."""
        ce, src = self.ce, self.src
        base = 0
        last_t = None
        carry: pa.Table | None = None
        for batch in self._slices():
            n = batch.num_rows
            scan.rows += n
            ids = text_ids(src, batch.column(ce.unit_id), ce.unit_id, scan.id_notes if base == 0 else None)
            tcol = batch.column(ce.time)
            ttype = tcol.type.value_type if pa.types.is_dictionary(tcol.type) else tcol.type
            if (pa.types.is_integer(ttype) or pa.types.is_floating(ttype)) and \
                    ce.time_format not in ("epoch_seconds", "epoch_milliseconds"):
                raise numeric_times_error(src, ce.time, ttype, self._first_number(ce.time), ce.time_format,
                                          "[audit.exposures] time_format")
            p = parse_times(src, tcol, ce.time, ce.time_format, "[audit.exposures] time_format")
            if len(p.bad):
                scan.bad.add(p.bad, base)
                scan.shown += p.shown[:100 - len(scan.shown)]
            if len(p.far):
                if scan.far_first is None:
                    scan.far_first = p.far_first
                scan.far.add(p.far, base)
            f = scan.flags
            if f is None:
                scan.flags = ParsedTimes(p.values[:0], p.bad[:0], [], p.far[:0], dates=p.dates, naive=p.naive,
                                         naive_text=p.naive_text, fmt_naive=p.fmt_naive)
            else:
                f.dates |= p.dates
                f.naive |= p.naive
                f.naive_text += p.naive_text
                f.fmt_naive |= p.fmt_naive
            kl = labels(batch.column(ce.kind))
            is_imp = pc.is_in(kl, value_set=pa.array(sorted(self.imp), pa.string()))
            is_clk = pc.is_in(kl, value_set=pa.array(sorted(self.clk), pa.string()))
            kind = np.where(is_imp.to_numpy(zero_copy_only=False), 0,
                            np.where(is_clk.to_numpy(zero_copy_only=False), 1, 2)).astype(np.int8)
            other = kind == 2
            if other.any():
                scan.other += int(other.sum())
                for v in pc.unique(kl.filter(pa.array(other))).to_pylist():
                    scan.other_levels.setdefault(v, None)
            empty = np.asarray(pc.equal(ids, "").to_numpy(zero_copy_only=False), dtype=bool)
            scan.empty.add(np.flatnonzero(empty), base)
            if scan.bad.n or scan.far.n:  # an error at the end: only keep counting
                base += n
                continue
            ns = p.values.array.asi8
            nat = np.asarray(p.values.isna().to_numpy(), dtype=bool)
            no_time = nat & ~empty
            scan.no_time.add(np.flatnonzero(no_time), base)
            t = ns // 1000  # whole microseconds (the reader dropped the digits below)
            late = ~nat & (t >= self.cut_us) & ~empty
            scan.late += int(late.sum())
            keep = ~(empty | nat | late)
            base += n
            idx = np.flatnonzero(keep)
            if not len(idx):
                continue
            tk = t[idx]
            if sorted_mode:
                if (last_t is not None and tk[0] < last_t) or bool((tk[1:] < tk[:-1]).any()):
                    raise Unsorted()
                last_t = int(tk[-1])
            camp = labels(batch.column(ce.campaign))
            taken = pa.array(idx)
            rows = pa.table([ids.take(taken).cast(pa.string()), pa.array(tk, pa.int64()), camp.take(taken),
                             kl.take(taken), pa.array(kind[idx], pa.int8()), pa.array(np.ones(len(idx), np.int64))],
                            schema=STREAM_SCHEMA)
            if not sorted_mode:
                yield from rows.to_batches()
                continue
            if carry is not None:
                rows = pa.concat_tables([carry, rows])
            tt = rows.column("t").to_numpy()
            cut = int(np.searchsorted(tt, tt[-1], side="left"))  # the last run of one time may go on
            carry = rows.slice(cut)
            if cut:
                yield from _deduplicated(rows.slice(0, cut)).to_batches()
        if carry is not None and carry.num_rows:
            yield from _deduplicated(carry).to_batches()

    def finish(self, scan: ExposureScan, duplicates: int, notes: list[str], counts: dict[str, int]) -> None:
        """Raise the whole file's time errors, else write the notes and counts `load_exposures` writes."""
        src, ce = self.src, self.ce
        where = "[audit.exposures] time_format"
        if scan.bad.n:
            raise bad_times(src, ce.time, scan.bad.n, src.rows(scan.bad.first, scan.bad.n), scan.shown,
                            ce.time_format, where)
        notes += scan.id_notes
        if scan.flags is not None:
            notes += time_notes(src, ce.time, ce.time_format, scan.flags)
        if scan.far.n:
            raise far_times(src, ce.time, scan.far.n, src.rows(scan.far.first, scan.far.n), scan.far_first)  # type: ignore[arg-type]
        counts["exposure_rows"] = scan.rows
        if scan.other:
            others = list(scan.other_levels)
            notes.append(f"{src.path.name}: {scan.other:,} row(s) have a '{ce.kind}' that is neither an "
                         f"impression nor a click ({', '.join(others[:5])}); counted as exposures of "
                         "kind 'other' (map them in [audit.exposures] impression_values / click_values)")
        counts["exposure_empty_ids"] = _note(src, ce.unit_id, scan.empty, "they name no unit", notes)
        counts["exposure_missing_time"] = _note(src, ce.time, scan.no_time, "an exposure needs a time", notes)
        counts["exposures_after_as_of"] = scan.late
        if scan.late:
            notes.append(f"{src.path.name}: {scan.late:,} exposure row(s) after the as-of date {self.as_of} are ignored")
        counts["exposure_duplicate_rows"] = duplicates
        if duplicates:
            notes.append(f"{src.path.name}: {duplicates:,} exposure row(s) repeat another row exactly (same id, "
                         "time, campaign and kind) and were counted once; if the vendor logs whole seconds, two real "
                         "impressions in one second look alike")


def _note(src: Source, col: str, rows: _Rows, what: str, notes: list[str]) -> int:
    """`audit.load`'s note for rows set aside (the same words)."""
    if rows.n:
        notes.append(f"{src.path.name}: {rows.n:,} row(s) with an empty or null '{col}' ({src.rows(rows.first, rows.n)}) "
                     f"were set aside: {what}")
    return rows.n


def _deduplicated(rows: pa.Table) -> pa.Table:
    """Rows sorted by time with exact repeats merged (n = copies): only rows that share a time are grouped."""
    t = rows.column("t").to_numpy()
    if len(t) < 2:
        return rows
    tie = t[1:] == t[:-1]
    if not tie.any():
        return rows
    in_run = np.concatenate([tie, [False]]) | np.concatenate([[False], tie])
    alone = rows.filter(pa.array(~in_run))
    g = (rows.filter(pa.array(in_run)).group_by(["id", "t", "camp", "kl"], use_threads=False)
         .aggregate([("kind", "min"), ("n", "sum")]))
    grouped = pa.table([g.column("id"), g.column("t"), g.column("camp"), g.column("kl"), g.column("kind_min"),
                        g.column("n_sum")], schema=STREAM_SCHEMA)
    return pa.concat_tables([alone, grouped])
