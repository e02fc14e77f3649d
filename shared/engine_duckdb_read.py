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

from .keys import duplicate_rows
from .load import cutoff_of
from .read import (
    MISSING_LEVEL,
    SHOW_ROWS,
    _READ_ERRORS,
    T_MAX_US,
    T_MIN_US,
    ParsedTimes,
    Source,
    header,
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

US_DAY = 86_400 * 10**6
BATCH_ROWS = 1 << 20  # rows per Parquet slice: a few tens of MB of Arrow buffers at a time
CSV_BLOCK = 1 << 24  # bytes per CSV slice (as the pandas reader's blocks)
KINDS = ("impression", "click", "other")
# camp and kl are codes of `ExposureReader.levels` (one numbering for the whole file)
STREAM_SCHEMA = pa.schema([("id", pa.large_string()), ("t", pa.int64()), ("camp", pa.int32()), ("kl", pa.int32()),
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
    duplicates: int = 0  # exact repeats removed while streaming (sorted mode)
    days: dict[int, int] = field(default_factory=dict)  # rows streamed per day number (sorted mode)
    flags: ParsedTimes | None = None  # the notes' flags, summed over the slices
    error: BaseException | None = None  # an error raised while DuckDB pulled the rows


def labels(arr: pa.Array) -> pa.DictionaryArray:
    """`read.read_labels`' levels, dictionary-encoded: empty or null is MISSING_LEVEL, other types their text.

    Only the (small) dictionary is rewritten; the rows keep their integer codes."""
    if not pa.types.is_dictionary(arr.type):
        if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            arr = arr.cast(pa.string())
        arr = pc.dictionary_encode(arr)
    words = [MISSING_LEVEL if v is None or v == "" else str(v) for v in arr.dictionary.to_pylist()]
    levels = list(dict.fromkeys([*words, MISSING_LEVEL]))
    lut = np.array([levels.index(w) for w in words] + [levels.index(MISSING_LEVEL)], dtype=np.int32)
    idx = arr.indices
    codes = pc.fill_null(idx, len(words)) if idx.null_count else idx
    return pa.DictionaryArray.from_arrays(pa.array(lut[codes.to_numpy(zero_copy_only=False)]),
                                          pa.array(levels, pa.string()))


@dataclass
class _Zoned(ParsedTimes):
    """Zoned timestamps read without pandas: microseconds and the empty cells."""

    us: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    nat: np.ndarray = field(default_factory=lambda: np.zeros(0, bool))


_UNIT_US = {"s": (10**6, 1), "ms": (1000, 1), "us": (1, 1), "ns": (1, 1000)}


def zoned_micros(arr: pa.Array) -> _Zoned | None:
    """Zoned timestamps inside 1678-2261 as whole microseconds, exactly as `parse_times` gives them
    (digits below the microsecond dropped, rounding down); None for any other column or slice."""
    if not (pa.types.is_timestamp(arr.type) and arr.type.tz is not None):
        return None
    mul, div = _UNIT_US[arr.type.unit]
    nat = np.asarray(arr.is_null().to_numpy(zero_copy_only=False), dtype=bool)
    raw = pc.fill_null(arr.cast(pa.int64()), 0).to_numpy(zero_copy_only=False)
    if mul > 1 and len(raw) and np.abs(raw).max() > (T_MAX_US // mul):
        return None
    us = raw * mul if mul > 1 else (raw // div if div > 1 else raw)  # numpy's // rounds down
    live = us[~nat]
    if len(live) and (live.min() < T_MIN_US or live.max() >= T_MAX_US):
        return None  # out of range: the general reader says where
    empty = np.zeros(0, np.int64)
    return _Zoned(None, empty, [], empty, us=us, nat=nat)


class ExposureReader:
    """The exposure log of a spec, checked like `read.read_mapped` and read in slices."""

    def __init__(self, spec: Spec, path: Path, as_of: date, notes: list[str]) -> None:
        ce = spec.audit.exposures
        self.ce, self.as_of = ce, as_of
        self.src = Source(Path(path), "exposures")
        present = header(self.src, ce.delimiter, notes)
        wanted = {"unit_id": ce.unit_id, "time": ce.time, "campaign": ce.campaign, "kind": ce.kind}
        _need(self.src, present, wanted, "[audit.exposures]", ce.delimiter)
        _no_duplicates(self.src, present, wanted, "[audit.exposures]")
        self.wanted = wanted
        self.columns = list(dict.fromkeys(wanted.values()))
        self.cut_us = cutoff_of(as_of).value // 1000
        self.imp, self.clk = set(ce.impression_values), set(ce.click_values)
        self.levels: dict[str, int] = {}  # every campaign and kind label seen -> its code in the stream

    def codes(self, arr: pa.DictionaryArray) -> np.ndarray:
        """The file-wide codes (`levels`) of a slice's labels."""
        lut = np.array([self.levels.setdefault(w, len(self.levels)) for w in arr.dictionary.to_pylist()],
                       dtype=np.int32)
        return lut[arr.indices.to_numpy(zero_copy_only=False)] if len(lut) else np.zeros(len(arr), np.int32)

    def slices(self, columns: list[str] | None = None) -> Iterator[pa.RecordBatch]:
        """The mapped columns (or `columns`) slice by slice, in file order."""
        src = self.src
        columns = columns or self.columns
        wanted = {k: c for k, c in self.wanted.items() if c in columns}
        try:
            if src.is_csv:
                opts = pacsv.ConvertOptions(include_columns=columns,
                                            column_types={c: pa.string() for c in columns},
                                            strings_can_be_null=False)
                reader = pacsv.open_csv(src.path, read_options=pacsv.ReadOptions(block_size=CSV_BLOCK),
                                        parse_options=pacsv.ParseOptions(delimiter=self.ce.delimiter),
                                        convert_options=opts)
                first = True
                for batch in reader:
                    if first:
                        _scalar_only(src, batch.schema.empty_table(), wanted, "[audit.exposures]")
                        first = False
                    yield batch
            else:
                pf = pq.ParquetFile(src.path)
                _scalar_only(src, pf.schema_arrow.empty_table(), wanted, "[audit.exposures]")
                md = pf.metadata
                if all(md.row_group(i).num_rows <= 4 * BATCH_ROWS for i in range(md.num_row_groups)):
                    # a row group at a time: Arrow decodes its columns on threads, and holds one group only
                    for i in range(md.num_row_groups):
                        yield from pf.read_row_group(i, columns=columns).to_batches(max_chunksize=BATCH_ROWS)
                else:  # large row groups: slices without read-ahead (pre-buffering would hold several)
                    pf = pq.ParquetFile(src.path, pre_buffer=False, buffer_size=1 << 20)
                    yield from pf.iter_batches(batch_size=BATCH_ROWS, columns=columns)
        except _READ_ERRORS as exc:
            raise InputError(f"{src.path}: cannot read the {src.role} file: {_why(exc)}") from None

    def kinds(self, raw_kind: pa.Array, scan: ExposureScan) -> tuple[pa.DictionaryArray, np.ndarray]:
        """A slice's kind labels and codes (0 impression, 1 click, 2 other); kinds that are neither are
        counted in `scan.other`, their labels kept in the pandas reader's order (a dictionary column's
        own, else first appearance)."""
        kl = labels(raw_kind)
        words = kl.dictionary.to_pylist()
        kind_of = np.array([0 if w in self.imp else 1 if w in self.clk else 2 for w in words], dtype=np.int8)
        kl_codes = kl.indices.to_numpy()
        kind = kind_of[kl_codes]
        other = kind == 2
        if other.any():
            scan.other += int(other.sum())
            used, first = np.unique(kl_codes[other], return_index=True)
            for c in (used if pa.types.is_dictionary(raw_kind.type) else used[np.argsort(first)]):
                scan.other_levels.setdefault(words[int(c)], None)
        return kl, kind

    def _first_number(self, col: str) -> object:
        for batch in self.slices():
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
        for batch in self.slices():
            n = batch.num_rows
            scan.rows += n
            ids = text_ids(src, batch.column(ce.unit_id), ce.unit_id, scan.id_notes if base == 0 else None)
            tcol = batch.column(ce.time)
            ttype = tcol.type.value_type if pa.types.is_dictionary(tcol.type) else tcol.type
            if (pa.types.is_integer(ttype) or pa.types.is_floating(ttype)) and \
                    ce.time_format not in ("epoch_seconds", "epoch_milliseconds"):
                raise numeric_times_error(src, ce.time, ttype, self._first_number(ce.time), ce.time_format,
                                          "[audit.exposures] time_format")
            fast = zoned_micros(tcol)
            p = fast if fast is not None else parse_times(src, tcol, ce.time, ce.time_format,
                                                          "[audit.exposures] time_format")
            if len(p.bad):
                scan.bad.add(p.bad, base)
                scan.shown += p.shown[:100 - len(scan.shown)]
            if len(p.far):
                if scan.far_first is None:
                    scan.far_first = p.far_first
                scan.far.add(p.far, base)
            f = scan.flags
            if f is None:
                scan.flags = ParsedTimes(None, p.bad[:0], [], p.far[:0], dates=p.dates, naive=p.naive,
                                         naive_text=p.naive_text, fmt_naive=p.fmt_naive)
            else:
                f.dates |= p.dates
                f.naive |= p.naive
                f.naive_text += p.naive_text
                f.fmt_naive |= p.fmt_naive
            kl, kind = self.kinds(batch.column(ce.kind), scan)
            empty = np.asarray(pc.equal(ids, "").to_numpy(zero_copy_only=False), dtype=bool)
            scan.empty.add(np.flatnonzero(empty), base)
            if scan.bad.n or scan.far.n:  # an error at the end: only keep counting
                base += n
                continue
            if isinstance(p, _Zoned):
                t, nat = p.us, p.nat
            else:
                t = p.values.array.asi8 // 1000  # whole microseconds (the reader dropped the digits below)
                nat = np.asarray(p.values.isna().to_numpy(), dtype=bool)
            no_time = nat & ~empty
            scan.no_time.add(np.flatnonzero(no_time), base)
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
            camp = self.codes(labels(batch.column(ce.campaign)))
            klc = self.codes(kl)
            if len(idx) == n:
                cols = [ids, camp, klc, kind]
            else:
                cols = [ids.take(pa.array(idx)), camp[idx], klc[idx], kind[idx]]
            rows = pa.table([cols[0].cast(pa.large_string()), pa.array(tk, pa.int64()), pa.array(cols[1], pa.int32()),
                             pa.array(cols[2], pa.int32()), pa.array(cols[3], pa.int8()),
                             _ones(len(idx))], schema=STREAM_SCHEMA)
            if not sorted_mode:
                yield from rows.to_batches()
                continue
            if carry is not None and carry.num_rows:
                rows = pa.concat_tables([carry, rows])
            tt = rows.column("t").to_numpy()
            cut = int(np.searchsorted(tt, tt[-1], side="left"))  # the last run of one time may go on
            carry = rows.slice(cut)
            if cut:
                yield from _counted(self._once(rows.slice(0, cut), tt[:cut], scan), scan).to_batches()
        if carry is not None and carry.num_rows:
            yield from _counted(self._once(carry, carry.column("t").to_numpy(), scan), scan).to_batches()

    @staticmethod
    def _once(rows: pa.Table, t: np.ndarray, scan: ExposureScan) -> pa.Table:
        """Rows sorted by time without their exact repeats (counted in `scan.duplicates`): only rows
        that share a time are compared, on integer codes of their id, campaign and kind."""
        if len(t) < 2:
            return rows
        tie = t[1:] == t[:-1]
        if not tie.any():
            return rows
        cand = np.flatnonzero(np.concatenate([tie, [False]]) | np.concatenate([[False], tie]))
        sub = rows.take(pa.array(cand))
        ids = pc.dictionary_encode(sub.column("id")).combine_chunks().indices.to_numpy(zero_copy_only=False)
        dup = duplicate_rows(t[cand], ids.astype(np.int64), *(sub.column(c).to_numpy().astype(np.int64)
                                                             for c in ("camp", "kl")))
        if not dup.any():
            return rows
        scan.duplicates += int(dup.sum())
        keep = np.ones(len(t), dtype=bool)
        keep[cand[dup]] = False
        return rows.filter(pa.array(keep))

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
            raise far_times(src, ce.time, scan.far.n, src.rows(scan.far.first, scan.far.n), scan.far_first)
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


def _counted(rows: pa.Table, scan: ExposureScan) -> pa.Table:
    """Count the rows per UTC day of their time (`LeakageTables.daily_rows`) as they stream."""
    if not rows.num_rows:
        return rows
    day = rows.column("t").to_numpy() // US_DAY  # // rounds down
    lo = int(day.min())
    n = np.bincount(day - lo)
    for off in np.flatnonzero(n).tolist():
        scan.days[lo + off] = scan.days.get(lo + off, 0) + int(n[off])
    return rows


_ONES = [pa.array(np.ones(0, np.int64))]


def _ones(n: int) -> pa.Array:
    """n ones (the copies column of rows not yet grouped), sliced from one shared array."""
    if len(_ONES[0]) < n:
        _ONES[0] = pa.array(np.ones(max(n, BATCH_ROWS), np.int64))
    return _ONES[0].slice(0, n)
