"""The I/O edge: read visits, exposures and identity links (CSV, CSV.gz or Parquet) into tidy frames.

Only the mapped columns are read; ids stay text (byte-exact, "NA" is an id, empty is missing);
low-cardinality text becomes categorical. Every problem either raises `InputError` naming the
file, the column and the first rows, or becomes an input note the report prints.
"""

from __future__ import annotations

import csv
import gzip
import io
import re
import zlib
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from armlock.assign import InputError

MISSING_LEVEL = "(missing)"  # the level an empty categorical value is counted under
SHOW_ROWS = 5  # how many row numbers an error message lists
_ZONE = r"(?:[Zz]|[+-]\d\d(?::?\d\d)?)$"
BOM = b"\xef\xbb\xbf"
PathLike = str | Path

# Internal column names of the tidy frames (segments and covariates keep their own names).
UNIT, TIME, ARM, FP, BROWSER = "_unit", "_time", "_arm", "_fp", "_browser"
CAMPAIGN, KIND, CUSTOMER = "_campaign", "_kind", "_customer"


@dataclass
class Source:
    """One input file: where it is, what it is for (`role`, e.g. "visits") and its format."""

    path: Path
    role: str

    @property
    def is_csv(self) -> bool:
        return _format(self.path, self.role) == "csv"

    def rows(self, positions: np.ndarray | list[int], total: int | None = None) -> str:
        """'lines 3, 9 (and 4 more)' for CSV (the header is line 1) or 'rows 2, 8' for Parquet."""
        pos = list(positions[:SHOW_ROWS])
        more = (total if total is not None else len(positions)) - len(pos)
        if self.is_csv:
            text = "line" + ("s" if len(pos) > 1 else "") + " " + ", ".join(str(p + 2) for p in pos)
        else:
            text = "row" + ("s" if len(pos) > 1 else "") + " " + ", ".join(str(p + 1) for p in pos)
        return text + (f" (and {more:,} more)" if more > 0 else "")


@dataclass
class Frames:
    """What the engine needs, with input notes and counts of everything set aside."""

    visits: pd.DataFrame
    exposures: pd.DataFrame | None = None
    identities: pd.DataFrame | None = None
    exposure_pos: np.ndarray | None = None  # each exposure row's row in `visits`, -1 if not there (audit.keys)
    notes: list[str] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    data_through: date | None = None  # the last day the visits have data for, up to the as-of date


def _format(path: Path, role: str) -> str:
    name = path.name.lower()
    if name.endswith((".parquet", ".pq")):
        return "parquet"
    if name.endswith((".csv", ".csv.gz")):
        return "csv"
    raise InputError(
        f"{path}: cannot tell the format of the {role} file from its name; "
        "use .csv, .csv.gz or .parquet"
    )


# What a corrupt file can raise while it is read: Arrow's own errors, OS errors (a Parquet page
# that fails to decompress), zlib / EOF errors from a damaged gzip body, and decoding errors.
_READ_ERRORS = (pa.ArrowException, OSError, EOFError, zlib.error, UnicodeDecodeError, ValueError)
_SEPARATORS = {";": "semicolon", "\t": "tab", "|": "pipe", ",": "comma"}


@dataclass
class Mapped:
    """A mapped file, read: its source, the table of the wanted columns, and which optional keys it has."""

    src: Source
    table: pa.Table
    columns: dict[str, str]  # key -> column name, for every column read (optional ones only if present)


def _first_line(src: Source) -> tuple[bytes, bool]:
    """The raw header line (without a leading BOM) and whether a BOM was there."""
    path = src.path
    opener = gzip.open if path.name.lower().endswith(".gz") else open
    with opener(path, "rb") as fh:
        first = fh.readline(1 << 20)
    bom = first.startswith(BOM)
    return (first[len(BOM):] if bom else first), bom


def header(src: Source, delimiter: str = ",", notes: list[str] | None = None) -> list[str]:
    """The file's column names (CSV header line or Parquet schema); a leading BOM is removed and noted."""
    path = src.path
    if not path.is_file():
        what = "is a directory, not a file" if path.is_dir() else "not found"
        raise InputError(f"{path}: {src.role} file {what}")
    try:
        if src.is_csv:
            first, bom = _first_line(src)
            text = first.decode("utf-8")
            if not text.strip():
                raise InputError(f"{path}: the {src.role} file is empty (no header line)")
            if bom and notes is not None:
                notes.append(f"{path.name}: a leading UTF-8 byte-order mark was removed (it is not data)")
            return next(csv.reader(io.StringIO(text), delimiter=delimiter))
        return list(pq.read_schema(path).names)
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: the {src.role} file is not UTF-8 text (byte {exc.start})") from None
    except (*_READ_ERRORS, csv.Error) as exc:
        kind = "CSV" if src.is_csv else "Parquet"
        raise InputError(f"{path}: cannot read the {src.role} file as {kind}: {_why(exc)}") from None


def _why(exc: BaseException) -> str:
    """A read error in words (a damaged gzip body says so rather than quoting zlib)."""
    text = str(exc) or type(exc).__name__
    if isinstance(exc, (zlib.error, EOFError, gzip.BadGzipFile)) or "zlib" in text or "gzip" in text.lower():
        return f"the gzip data is damaged or cut short ({text}); re-export or re-copy the file"
    return text


def _looks_separated(present: list[str], delimiter: str) -> str:
    """' (the header looks ;-separated: set delimiter = ";" in ...)' when a single column hides others."""
    if len(present) != 1:
        return ""
    counts = {sep: present[0].count(sep) for sep in _SEPARATORS if sep != delimiter}
    sep, n = max(counts.items(), key=lambda kv: kv[1])
    if n == 0:
        return ""
    shown = "\\t" if sep == "\t" else sep
    return f"; the header looks {shown}-separated ({_SEPARATORS[sep]}): set delimiter = \"{shown}\""


def _setting(table: str, key: str) -> str:
    """'[audit.visits] arm' - or the key itself when it names its own table ('[audit] segments[0]')."""
    return key if key.startswith("[") else f"{table} {key}"


def _need(src: Source, present: list[str], wanted: dict[str, str], table: str, delimiter: str = ",") -> None:
    """Raise if mapped columns are missing, naming every missing one at once and the columns the file has."""
    missing: list[tuple[str, str]] = []
    for key, col in wanted.items():  # a column two settings name (a segment and a covariate) is said once
        if col not in present and all(col != c for _, c in missing):
            missing.append((key, col))
    if not missing:
        return
    hint = _looks_separated(present, delimiter) if src.is_csv else ""
    if hint:
        hint += f" in {table}"
    has = f"the file has columns: {', '.join(present) or '(none)'}{hint}"
    if len(missing) == 1:
        key, col = missing[0]
        raise InputError(f"{src.path}: column '{col}' not found in the {src.role} file (spec: "
                         f"{_setting(table, key)} = \"{col}\"); {has}")
    cols = ", ".join(f"'{c}'" for _, c in missing)
    spec = ", ".join(f"{_setting(table, k)} = \"{c}\"" for k, c in missing)
    raise InputError(f"{src.path}: {len(missing)} columns not found in the {src.role} file: {cols} (spec: {spec}); "
                     f"{has}")


def _no_duplicates(src: Source, present: list[str], wanted: dict[str, str], table: str) -> None:
    """A mapped column whose name appears twice is ambiguous: refuse rather than pick one."""
    for key, col in wanted.items():
        where = [i + 1 for i, c in enumerate(present) if c == col]
        if len(where) > 1:
            raise InputError(
                f"{src.path}: column '{col}' ({_setting(table, key)}) appears {len(where)} times in the {src.role} "
                f"file (columns {', '.join(map(str, where))}); which one holds the data is ambiguous: "
                "rename or drop the extra column(s)"
            )


def _scalar_only(src: Source, table: pa.Table, wanted: dict[str, str], spec_table: str) -> None:
    """Nested columns (lists, structs, maps) cannot be ids, times or labels."""
    for key, col in wanted.items():
        typ = table.schema.field(col).type
        if pa.types.is_nested(typ) or pa.types.is_union(typ):
            raise InputError(
                f"{src.path}: column '{col}' ({_setting(spec_table, key)}) holds {typ}, not one value per row; "
                "flatten it in the export or map another column"
            )


def _read_table(src: Source, columns: list[str], delimiter: str = ",") -> pa.Table:
    try:
        if src.is_csv:
            opts = pacsv.ConvertOptions(
                include_columns=columns,
                column_types={c: pa.string() for c in columns},
                strings_can_be_null=False,
            )
            return pacsv.read_csv(src.path, read_options=pacsv.ReadOptions(block_size=1 << 24),
                                  parse_options=pacsv.ParseOptions(delimiter=delimiter),
                                  convert_options=opts)
        return pq.read_table(src.path, columns=columns)
    except _READ_ERRORS as exc:
        raise InputError(f"{src.path}: cannot read the {src.role} file: {_why(exc)}") from None


def read_mapped(path: PathLike, role: str, spec_table: str, columns: dict[str, str], notes: list[str], *,
                optional: dict[str, str] | None = None, delimiter: str = ",") -> Mapped:
    """Read the mapped columns of one file (CSV, CSV.gz or Parquet) with clear errors.

    The one reader of every mapped input (visits, exposures, identity links, and any later file
    with a column map). `columns` maps setting keys to required column names, `optional` to
    columns read when present ("" = not mapped). Rules, which any engine must follow:

    - the format comes from the file name (.csv, .csv.gz, .parquet/.pq); `delimiter` applies to CSV;
    - a leading UTF-8 byte-order mark is not data: it is removed (and noted);
    - a required column that is missing is an error listing the file's columns (and, when the
      header is one field holding separators, which `delimiter` would read it);
    - a mapped column whose name appears more than once is an error (ambiguous);
    - a nested column (list, struct, map) mapped as a value is an error;
    - damaged files (gzip bodies, Parquet pages) are input errors naming the file.
    """
    src = Source(Path(path), role)
    present = header(src, delimiter, notes)
    _need(src, present, columns, spec_table, delimiter)
    found = {k: c for k, c in (optional or {}).items() if c and c in present}
    wanted = {**columns, **found}
    _no_duplicates(src, present, wanted, spec_table)
    table = _read_table(src, list(dict.fromkeys(wanted.values())), delimiter)
    _scalar_only(src, table, wanted, spec_table)
    return Mapped(src=src, table=table, columns=wanted)


def _arrow(table: pa.Table, col: str) -> pa.ChunkedArray:
    arr = table.column(col)
    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(arr.type.value_type)
    return arr


def text_ids(src: Source, arr: pa.ChunkedArray | pa.Array, col: str, notes: list[str] | None) -> pa.ChunkedArray | pa.Array:
    """Ids as Arrow text, nulls as "": integers become their decimal text (noted), other types raise."""
    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(arr.type.value_type)
    if pa.types.is_integer(arr.type):
        if notes is not None:
            notes.append(f"{src.path.name}: ids in '{col}' are integers; hashed as their decimal text")
        arr = arr.cast(pa.string())
    elif not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        raise InputError(
            f"{src.path}: column '{col}' holds {arr.type}, not text ids; export the ids as text "
            "exactly as the site stores them"
        )
    return pc.fill_null(arr, "")


def read_ids(src: Source, table: pa.Table, col: str, notes: list[str]) -> tuple[pd.Series, np.ndarray]:
    """Ids as text; returns (ids, mask of empty or null ids)."""
    arr = text_ids(src, _arrow(table, col), col, notes)
    ids = pd.Series(arr.to_pandas(), dtype="str", name=col)
    empty = pc.equal(arr, "").to_numpy(zero_copy_only=False)
    return ids.reset_index(drop=True), np.asarray(empty, dtype=bool)


# Times the engine can hold (nanoseconds since 1970 in an int64); anything outside is an input error.
_T_MIN = pd.Timestamp("1678-01-01", tz="UTC")
_T_MAX = pd.Timestamp("2262-01-01", tz="UTC")
_FORMAT_WORDS = {"iso8601": "ISO 8601", "epoch_seconds": "epoch seconds", "epoch_milliseconds": "epoch milliseconds"}


def looks_like(sample: str) -> str:
    """What a time value that did not parse looks like, and the format setting that reads it."""
    t = sample.strip()
    if re.fullmatch(r"-?\d{9,10}(\.\d+)?", t):
        return 'looks like epoch seconds: set "epoch_seconds"'
    if re.fullmatch(r"-?\d{12,13}(\.\d+)?", t):
        return 'looks like epoch milliseconds: set "epoch_milliseconds"'
    m = re.fullmatch(r"(\d{1,2})([./-])(\d{1,2})\2(\d{4})(.*)", t)
    if m:
        sep, rest = m.group(2), m.group(5)
        tail = " %H:%M:%S" if re.fullmatch(r"[ T]\d\d:\d\d:\d\d", rest) else (" %H:%M" if re.fullmatch(r"[ T]\d\d:\d\d", rest) else "")
        if int(m.group(1)) > 12:
            return f'looks like day/month/year: set "%d{sep}%m{sep}%Y{tail}"'
        if int(m.group(3)) > 12:
            return f'looks like month/day/year: set "%m{sep}%d{sep}%Y{tail}"'
        return (f'looks like day/month/year or month/day/year: set "%d{sep}%m{sep}%Y{tail}" or '
                f'"%m{sep}%d{sep}%Y{tail}" (check which one your export writes)')
    return "is not a time in the set format"


EPOCH_DIGITS = {"epoch_seconds": 6, "epoch_milliseconds": 3}  # decimal digits from the unit to the microsecond
EPOCH_TEXT = r"^(?P<sign>[+-]?)(?P<whole>[0-9]{1,16})(?:\.(?P<frac>[0-9]*))?$"  # plain decimals only
EPOCH_LIMIT_S = 9.2e9  # |seconds| beyond this would overflow int64 nanoseconds


def epoch_micros(arr: pa.ChunkedArray, fmt: str) -> tuple[np.ndarray, np.ndarray]:
    """Epoch seconds or milliseconds -> (microseconds since 1970 as int64, valid mask), exactly.

    The rule every engine follows: integers are scaled exactly; decimal text is read digit by digit
    (digits beyond the microsecond are dropped); binary floats are multiplied once (correctly rounded)
    and rounded down to the microsecond. Invalid: text that is not a plain decimal, NaN or infinity
    in a float column, and times beyond the int64-nanosecond range.
    """
    digits = EPOCH_DIGITS[fmt]
    unit = 10 ** digits
    limit = EPOCH_LIMIT_S * 10**6
    if pa.types.is_integer(arr.type):
        whole = arr.cast(pa.int64()).to_numpy(zero_copy_only=False).astype("float64")  # nulls -> NaN
        ok = ~np.isnan(whole) & (np.abs(whole) * unit < limit)
        vals = np.where(ok, np.nan_to_num(whole), 0).astype(np.int64)
        return vals * unit, ok
    if pa.types.is_floating(arr.type):
        x = arr.cast(pa.float64()).to_numpy(zero_copy_only=False) * float(unit)
        ok = np.isfinite(x) & (np.abs(x) < limit)
        return np.floor(np.where(ok, x, 0.0)).astype(np.int64), ok
    return _epoch_text(arr, digits)


def _epoch_text(arr: pa.ChunkedArray, digits: int) -> tuple[np.ndarray, np.ndarray]:
    text = pc.utf8_trim_whitespace(pc.fill_null(arr, ""))
    parts = pc.extract_regex(text, EPOCH_TEXT)
    ok = pc.is_valid(parts).to_numpy(zero_copy_only=False)
    sign = pc.struct_field(parts, "sign").to_numpy(zero_copy_only=False)
    whole = pc.cast(pc.fill_null(pc.struct_field(parts, "whole"), "0"), pa.int64()).to_numpy(zero_copy_only=False)
    frac = pc.utf8_rpad(pc.utf8_slice_codeunits(pc.fill_null(pc.struct_field(parts, "frac"), ""), 0, digits),
                        digits, "0")
    frac_v = pc.cast(frac, pa.int64()).to_numpy(zero_copy_only=False) if digits else np.zeros(len(ok), np.int64)
    unit = 10 ** digits
    ok = ok & (whole < EPOCH_LIMIT_S * 10**6 / unit)
    us = np.where(ok, whole, 0).astype(np.int64) * unit + np.where(ok, frac_v, 0)
    return np.where(sign == "-", -us, us), ok


def strftime_regex(fmt: str) -> tuple[str, list[str]]:
    """A strftime pattern as an anchored regular expression (the directives' capture groups, in order).

    Only the numeric directives %Y %m %d %H %M %S %f (and %%) are read; each matches what Python's
    and pandas' strptime match (CPython `_strptime.TimeRE`, whose ranges are copied here; %f takes
    up to 9 digits as pandas does) and whitespace in the pattern matches any run of whitespace.
    Other directives raise ValueError naming them (used by engines that parse patterns themselves).
    """
    out, order, i = ["^"], [], 0
    while i < len(fmt):
        ch = fmt[i]
        if ch == "%" and i + 1 < len(fmt):
            d = fmt[i + 1]
            i += 2
            if d == "%":
                out.append("%")
            elif d in _DIRECTIVES:
                out.append("(" + _DIRECTIVES[d] + ")")
                order.append(d)
            else:
                raise ValueError(f"%{d}")
            continue
        if ch.isspace():
            while i < len(fmt) and fmt[i].isspace():
                i += 1
            out.append(r"\s+")
            continue
        out.append(re.escape(ch))
        i += 1
    return "".join(out) + "$", order


_DIRECTIVES = {"Y": r"\d\d\d\d", "m": r"1[0-2]|0[1-9]|[1-9]", "d": r"3[0-1]|[1-2]\d|0[1-9]|[1-9]| [1-9]",
               "H": r"2[0-3]|[0-1]\d|\d", "M": r"[0-5]\d|\d", "S": r"6[0-1]|[0-5]\d|\d", "f": r"[0-9]{1,9}"}


def bad_times(src: Source, col: str, n: int, first: str, samples: list[str], fmt: str, where: str) -> InputError:
    """The error for times that do not parse (both engines): count, first rows, a sample and a hint.

    `first` is `Source.rows` of the bad rows, `samples` their text (the first up to 100, in order)."""
    sample = samples[0]
    if fmt == "iso8601":
        known = [t for t in samples if not looks_like(t).startswith("is not")]
        if known:
            hint = f"e.g. {sample!r}; {known[0]!r} {looks_like(known[0])} in {where}"
        else:
            hint = f"e.g. {sample!r}; write times like 2026-12-01T10:00:00Z, or set the format in {where}"
    else:
        hint = f"e.g. {sample!r}, which does not match {where} = {fmt!r}"
    return InputError(f"{src.path}: column '{col}' has {n:,} time(s) that are not "
                      f"{_FORMAT_WORDS.get(fmt, repr(fmt))} (first: {first}; {hint})")


T_MIN_US = _T_MIN.value // 1000  # the same bounds in microseconds since 1970 (for engines that count them)
T_MAX_US = _T_MAX.value // 1000


class _Named(Protocol):
    """Any input with a `path` to name in a message (a `Source`, or the Spark engine's)."""

    @property
    def path(self) -> Any: ...


def far_times(src: _Named, col: str, n: int, first: str, example: pd.Timestamp) -> InputError:
    """The error for times outside the years 1678-2261 (both engines): count, first rows, the first such time."""
    return InputError(f"{src.path}: column '{col}' has {n:,} time(s) outside the years 1678-2261 "
                      f"(first: {first}; e.g. {example}); check the export or the time format")


def _whole_micros(times: pd.Series) -> pd.Series:
    """UTC times as datetime64[ns, UTC] with the digits below the microsecond dropped (rounded down).

    Every engine holds times to the microsecond (Spark's timestamps have no finer digits), so a
    nanosecond in the input never makes two engines disagree on an order or a duplicate. Times of
    a coarser unit have no such digits: they are only widened."""
    if times.dt.unit != "ns":
        return times.dt.as_unit("ns")
    v = times.array.asi8
    below = v % 1000  # numpy's % takes the divisor's sign: times before 1970 round down too
    below[v == np.iinfo(np.int64).min] = 0  # NaT (an empty cell) stays NaT
    if not below.any():
        return times
    out = v - below
    return pd.Series(pd.DatetimeIndex(out.view("datetime64[ns]"), tz="UTC"), name=times.name)


def _inside(values: pa.ChunkedArray) -> bool:
    """True when every time lies in the years the engine holds (checked on Arrow's min and max)."""
    mm = pc.min_max(values)
    lo, hi = mm["min"].value, mm["max"].value
    if lo is None:
        return True
    bounds = pa.array([_T_MIN, _T_MAX], type=pa.timestamp("us", "UTC")).cast(values.type)
    return bool(lo >= bounds[0].value and hi < bounds[1].value)


@dataclass
class ParsedTimes:
    """One pass of the time rules over a column (or a slice of it), before any error is raised.

    `values` are UTC times in whole microseconds (NaT for empty cells; meaningless where `bad` or
    `far` is not empty); `bad` / `far` are the positions that do not parse / lie outside 1678-2261,
    `shown` the text of the first 100 bad ones, `far_first` the first far time. The rest says which
    notes the column earns: `dates` (dates without a time), `naive` (zone-less Parquet timestamps),
    `naive_text` (zone-less ISO 8601 texts, counted), `fmt_naive` (a pattern without a zone)."""

    values: pd.Series
    bad: np.ndarray
    shown: list[str]
    far: np.ndarray
    far_first: pd.Timestamp | None = None
    dates: bool = False
    naive: bool = False
    naive_text: int = 0
    fmt_naive: bool = False


def numeric_times_error(src: Source, col: str, typ: pa.DataType, first: object, fmt: str, where: str) -> InputError:
    """The error for a numeric time column without an epoch format; `first` is its first non-null value."""
    hint = looks_like(str(first)) if first is not None else "holds numbers"
    return InputError(f"{src.path}: column '{col}' holds numbers ({typ}), not {_FORMAT_WORDS.get(fmt, fmt)} "
                      f"times; it {hint} in {where}")


def time_notes(src: Source, col: str, fmt: str, p: ParsedTimes) -> list[str]:
    """The input notes a parsed time column earns (read_times' and every streaming reader's)."""
    if p.dates:
        return [f"{src.path.name}: '{col}' holds dates without a time; read as midnight UTC"]
    if p.naive:
        return [f"{src.path.name}: times in '{col}' have no zone; read as UTC"]
    if p.naive_text:
        return [f"{src.path.name}: {p.naive_text:,} time(s) in '{col}' have no zone; read as UTC"]
    if p.fmt_naive:
        return [f"{src.path.name}: times in '{col}' ({fmt!r}) have no zone; read as UTC"]
    return []


def parse_times(src: Source, arr: pa.ChunkedArray, col: str, fmt: str = "iso8601", where: str = "") -> ParsedTimes:
    """The time rules of `read_times` over one column or slice, raising only for the column's type.

    A numeric column without an epoch format, or a type that holds no times, raises here (the
    first error `read_times` gives); values that do not parse or lie outside 1678-2261 are
    returned as positions, so a reader of slices can count them over the whole file."""
    where = where or "the column's time format"
    none = np.zeros(0, np.int64)
    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(arr.type.value_type)
    if pa.types.is_timestamp(arr.type) or pa.types.is_date(arr.type):
        try:  # nanoseconds stay as they are; coarser units widen to microseconds (exact, wider range)
            nano = pa.types.is_timestamp(arr.type) and arr.type.unit == "ns"
            values = arr if nano else arr.cast(pa.timestamp("us", arr.type.tz if pa.types.is_timestamp(arr.type) else None))
        except pa.ArrowException as exc:
            raise InputError(f"{src.path}: column '{col}' has times that cannot be read: {exc}") from None
        if pa.types.is_timestamp(arr.type) and arr.type.tz is not None and _inside(values):
            # the common case, zoned times within the engine's range: one cast to nanoseconds in Arrow
            # (one combined chunk converts to pandas without a copy; many chunks take a slow path)
            out = pd.Series(_combined(values.cast(pa.timestamp("ns", "UTC"))).to_pandas())
            return ParsedTimes(_whole_micros(out) if nano else out, none, [], none)
        out = pd.Series(_combined(values).to_pandas())
        dates = naive = False
        if pa.types.is_date(arr.type):
            dates = True
            out = out.dt.tz_localize("UTC")
        elif out.dt.tz is None:
            naive = True
            out = out.dt.tz_localize("UTC")
        else:
            out = out.dt.tz_convert("UTC")
        return _with_range(ParsedTimes(out, none, [], none, dates=dates, naive=naive))
    numeric = pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type)
    if numeric and fmt not in ("epoch_seconds", "epoch_milliseconds"):
        sample = pc.drop_null(arr)
        raise numeric_times_error(src, col, arr.type, sample[0].as_py() if len(sample) else None, fmt, where)
    if not (numeric or pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        raise InputError(f"{src.path}: column '{col}' holds {arr.type}, not times (use ISO 8601 text or timestamps)")
    if numeric:
        text = pd.Series(arr.cast(pa.float64()).to_numpy(zero_copy_only=False))
        blank = text.isna().to_numpy()
        shown = text.astype("str")
    else:
        shown = pd.Series(pc.utf8_trim_whitespace(pc.fill_null(arr, "")).to_pandas(), dtype="str")
        blank = (shown == "").to_numpy()
        text = shown
    if fmt in EPOCH_DIGITS:
        us, ok = epoch_micros(arr if isinstance(arr, pa.ChunkedArray) else pa.chunked_array([arr]), fmt)
        stamps = us.astype("datetime64[us]")
        stamps[~ok] = np.datetime64("NaT")
        parsed = pd.Series(pd.to_datetime(stamps, utc=True))
        bad = np.flatnonzero(~ok & ~blank)
    elif fmt == "iso8601":
        parsed = pd.to_datetime(text, utc=True, format="ISO8601", errors="coerce")
        bad = np.flatnonzero(parsed.isna().to_numpy() & ~blank)
    else:
        parsed = pd.to_datetime(text, utc=True, format=fmt, errors="coerce")
        bad = np.flatnonzero(parsed.isna().to_numpy() & ~blank)
    out = ParsedTimes(parsed, bad, [str(shown.iloc[i]) for i in bad[:100]], none)
    if len(bad):
        return out
    if fmt == "iso8601":
        zoned = text.str.contains(_ZONE, regex=True)
        out.naive_text = int((~zoned & ~pd.Series(blank)).sum())
    elif fmt not in EPOCH_DIGITS and "%z" not in fmt and "%Z" not in fmt:
        out.fmt_naive = bool(int((~blank).sum()))
    return _with_range(out)


def _combined(values: pa.ChunkedArray | pa.Array) -> pa.Array:
    return values.combine_chunks() if isinstance(values, pa.ChunkedArray) else values


def _with_range(p: ParsedTimes) -> ParsedTimes:
    """Fills `far` (times outside 1678-2261) and, when there are none, drops the digits below the microsecond."""
    parsed = p.values
    far = np.flatnonzero(((parsed < _T_MIN) | (parsed >= _T_MAX)).fillna(False).to_numpy(dtype=bool))
    if len(far):
        p.far, p.far_first = far, parsed.iloc[far[0]].as_unit("us")
    else:
        p.values = _whole_micros(parsed)
    return p


def read_times(src: Source, table: pa.Table, col: str, notes: list[str], fmt: str = "iso8601",
               setting: str = "") -> pd.Series:
    """Times as UTC timestamps (NaT for empty cells); zone-less times are read as UTC and noted.

    `fmt` is the column's time format ("iso8601", "epoch_seconds", "epoch_milliseconds" or a
    strftime pattern); it applies to text and numbers, while Parquet timestamps are read as
    they are. `setting` names the spec key that sets it, for the messages. (`parse_times` holds
    the rules; this raises `bad_times` or `far_times` over the whole column.)
    """
    p = parse_times(src, _arrow(table, col), col, fmt, setting)
    if len(p.bad):
        raise bad_times(src, col, len(p.bad), src.rows(p.bad), p.shown, fmt, setting or "the column's time format")
    notes.extend(time_notes(src, col, fmt, p))
    if len(p.far):
        raise far_times(src, col, len(p.far), src.rows(p.far), p.far_first)
    return p.values


def decimal_floats(arr: pa.ChunkedArray) -> np.ndarray:
    """Decimals (a warehouse's money columns) as float64, NaN for nulls, by the rule every engine follows.

    Up to 18 digits, the unscaled integer as a double divided by 10**scale: Spark's own cast
    (`Decimal.toDouble`), and the nearest double whenever the unscaled value is below 2**53, as any
    real amount is. Arrow's cast is not used: it misses the nearest double for about one value in
    eight of decimal(12, 2) (measured against Python's exact `float(Decimal)`). Wider decimals:
    each value's nearest double, as Spark's wide decimals give.
    """
    t = arr.type
    if t.precision > 18:
        return np.array([np.nan if v is None else float(v) for v in arr.to_pylist()], dtype=np.float64)
    width = t.byte_width  # 4, 8, 16 or 32 bytes, little-endian two's complement
    parts = []
    for chunk in arr.chunks:
        words = np.frombuffer(chunk.buffers()[1], dtype=np.int32 if width == 4 else np.int64)
        low = words.reshape(-1, max(width // 8, 1))[:, 0][chunk.offset:chunk.offset + len(chunk)]
        x = low.astype(np.float64) / float(10 ** t.scale)  # up to 18 digits: the low word is the value
        if chunk.null_count:
            x[chunk.is_null().to_numpy(zero_copy_only=False)] = np.nan
        parts.append(x)
    return np.concatenate(parts) if parts else np.zeros(0, np.float64)


def read_numbers(src: Source, table: pa.Table, col: str) -> pd.Series:
    """A numeric covariate as float64 (NaN for empty cells); text that is not a number raises.

    Decimals are read by `decimal_floats`. Integers beyond 2^53 (even beyond int64) become the
    nearest float; +/-infinity passes through (the balance tables count it as invalid and note it).
    """
    arr = _arrow(table, col)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_boolean(arr.type):
        return pd.Series(arr.cast(pa.float64(), safe=False).to_numpy(zero_copy_only=False))
    if pa.types.is_decimal(arr.type):
        return pd.Series(decimal_floats(arr))
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        raise InputError(f"{src.path}: column '{col}' holds {arr.type}, not numbers")
    text = pd.Series(pc.utf8_trim_whitespace(pc.fill_null(arr, "")).to_pandas(), dtype="str")
    nums = pd.to_numeric(text.where(text != "", None), errors="coerce").astype("float64")
    bad = np.flatnonzero(nums.isna().to_numpy() & (text != "").to_numpy())
    if len(bad):
        raise InputError(
            f"{src.path}: column '{col}' has {len(bad):,} value(s) that are not numbers "
            f"(first: {src.rows(bad)}; e.g. {text.iloc[bad[0]]!r})"
        )
    return nums


def read_labels(table: pa.Table, col: str) -> pd.Series:
    """A categorical column: text levels (unused ones dropped), empty or null counted as MISSING_LEVEL."""
    arr = table.column(col)
    if pa.types.is_dictionary(arr.type) and pa.types.is_string(arr.type.value_type):
        enc = pa.table({"x": arr}).unify_dictionaries().column("x").combine_chunks()
        if isinstance(enc, pa.ChunkedArray):  # no chunks at all
            enc = pa.array([], type=arr.type)
    else:
        if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            arr = arr.cast(pa.string())
        enc = pc.fill_null(arr, "").dictionary_encode().combine_chunks()
    raw = [MISSING_LEVEL if v is None or v == "" else str(v) for v in enc.dictionary.to_pylist()] + [MISSING_LEVEL]
    levels = list(dict.fromkeys(raw))  # "" and null both become MISSING_LEVEL
    lut = np.array([levels.index(v) for v in raw], dtype=np.int64)
    idx = enc.indices if not enc.indices.null_count else pc.fill_null(enc.indices, len(raw) - 1)
    used = np.zeros(len(levels), dtype=bool)
    used[lut[pc.unique(idx).to_numpy(zero_copy_only=False).astype(np.int64)]] = True
    keep = [v for v, u in zip(levels, used) if u]
    to_kept = (np.cumsum(used) - 1)[lut]  # raw index -> index among the levels in use
    small = np.int8 if len(keep) < 2**7 else np.int16 if len(keep) < 2**15 else np.int32
    codes = idx.to_numpy(zero_copy_only=False)
    if not np.array_equal(to_kept, np.arange(len(raw))) or codes.dtype.itemsize > np.dtype(small).itemsize:
        codes = to_kept.astype(small)[codes]  # a small table: the gather is cheap
    return pd.Series(pd.Categorical.from_codes(codes, categories=keep))
