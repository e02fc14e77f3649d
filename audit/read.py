"""The I/O edge: read visits, exposures and identity links (CSV, CSV.gz or Parquet) into tidy frames.

Only the mapped columns are read; ids stay text (byte-exact, "NA" is an id, empty is missing);
low-cardinality text becomes categorical. Every problem either raises `InputError` naming the
file, the column and the first rows, or becomes an input note the report prints.
"""

from __future__ import annotations

import csv
import gzip
import io
from dataclasses import dataclass, field
from pathlib import Path

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
    notes: list[str] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)


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


def _header(src: Source) -> list[str]:
    path = src.path
    if not path.is_file():
        what = "is a directory, not a file" if path.is_dir() else "not found"
        raise InputError(f"{path}: {src.role} file {what}")
    try:
        if src.is_csv:
            opener = gzip.open if path.name.lower().endswith(".gz") else open
            with opener(path, "rt", encoding="utf-8-sig", newline="") as fh:  # type: ignore[operator]
                first = fh.readline()
            if not first.strip():
                raise InputError(f"{path}: the {src.role} file is empty (no header line)")
            return next(csv.reader(io.StringIO(first)))
        return list(pq.read_schema(path).names)
    except InputError:
        raise
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: the {src.role} file is not UTF-8 text (byte {exc.start})") from None
    except (OSError, pa.ArrowException, EOFError) as exc:
        kind = "CSV" if src.is_csv else "Parquet"
        raise InputError(f"{path}: cannot read the {src.role} file as {kind}: {exc}") from None


def _need(src: Source, present: list[str], wanted: dict[str, str], table: str) -> None:
    """Raise if a mapped column is missing, listing the columns the file does have."""
    for key, col in wanted.items():
        if col not in present:
            raise InputError(
                f"{src.path}: column '{col}' not found in the {src.role} file (spec: {table} "
                f"{key} = \"{col}\"); the file has columns: {', '.join(present) or '(none)'}"
            )


def _read_table(src: Source, columns: list[str]) -> pa.Table:
    try:
        if src.is_csv:
            opts = pacsv.ConvertOptions(
                include_columns=columns,
                column_types={c: pa.string() for c in columns},
                strings_can_be_null=False,
            )
            return pacsv.read_csv(src.path, read_options=pacsv.ReadOptions(block_size=1 << 24),
                                  convert_options=opts)
        return pq.read_table(src.path, columns=columns)
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"{src.path}: cannot read the {src.role} file: {exc}") from None


def _arrow(table: pa.Table, col: str) -> pa.ChunkedArray:
    arr = table.column(col)
    if pa.types.is_dictionary(arr.type):
        arr = arr.cast(arr.type.value_type)
    return arr


def read_ids(src: Source, table: pa.Table, col: str, notes: list[str]) -> tuple[pd.Series, np.ndarray]:
    """Ids as text; returns (ids, mask of empty or null ids)."""
    arr = _arrow(table, col)
    if pa.types.is_integer(arr.type):
        notes.append(f"{src.path.name}: ids in '{col}' are integers; hashed as their decimal text")
        arr = arr.cast(pa.string())
    elif not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        raise InputError(
            f"{src.path}: column '{col}' holds {arr.type}, not text ids; export the ids as text "
            "exactly as the site stores them"
        )
    arr = pc.fill_null(arr, "")
    ids = pd.Series(arr.to_pandas(), dtype="str", name=col)
    empty = pc.equal(arr, "").to_numpy(zero_copy_only=False)
    return ids.reset_index(drop=True), np.asarray(empty, dtype=bool)


def read_times(src: Source, table: pa.Table, col: str, notes: list[str]) -> pd.Series:
    """Times as UTC timestamps (NaT for empty cells); zone-less times are read as UTC and noted."""
    arr = _arrow(table, col)
    if pa.types.is_timestamp(arr.type):
        out = pd.Series(arr.to_pandas())
        if out.dt.tz is None:
            notes.append(f"{src.path.name}: times in '{col}' have no zone; read as UTC")
            return out.dt.tz_localize("UTC")
        return out.dt.tz_convert("UTC")
    if pa.types.is_date(arr.type):
        notes.append(f"{src.path.name}: '{col}' holds dates without a time; read as midnight UTC")
        return pd.to_datetime(pd.Series(arr.to_pandas())).dt.tz_localize("UTC")
    if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        raise InputError(f"{src.path}: column '{col}' holds {arr.type}, not times (use ISO 8601 text or timestamps)")
    text = pd.Series(pc.utf8_trim_whitespace(pc.fill_null(arr, "")).to_pandas(), dtype="str")
    parsed = pd.to_datetime(text, utc=True, format="ISO8601", errors="coerce")
    blank = (text == "").to_numpy()
    bad = np.flatnonzero(parsed.isna().to_numpy() & ~blank)
    if len(bad):
        sample = text.iloc[bad[0]]
        raise InputError(
            f"{src.path}: column '{col}' has {len(bad):,} time(s) that are not ISO 8601 "
            f"(first: {src.rows(bad)}; e.g. {sample!r}); write times like 2026-12-01T10:00:00Z"
        )
    zoned = text.str.contains(_ZONE, regex=True)
    naive = int((~zoned & ~pd.Series(blank)).sum())
    if naive:
        notes.append(f"{src.path.name}: {naive:,} time(s) in '{col}' have no zone; read as UTC")
    return parsed


def read_numbers(src: Source, table: pa.Table, col: str) -> pd.Series:
    """A numeric covariate as float64 (NaN for empty cells); text that is not a number raises."""
    arr = _arrow(table, col)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_boolean(arr.type):
        return pd.Series(arr.cast(pa.float64()).to_numpy(zero_copy_only=False))
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
    codes = pc.fill_null(enc.indices, len(raw) - 1).to_numpy(zero_copy_only=False).astype(np.int32)
    levels = list(dict.fromkeys(raw))
    lut = np.array([levels.index(v) for v in raw], dtype=np.int32)
    codes = lut[codes]
    used = np.bincount(codes, minlength=len(levels)) > 0
    keep = [v for v, u in zip(levels, used) if u]
    remap = np.cumsum(used) - 1
    return pd.Series(pd.Categorical.from_codes(remap[codes].astype(np.int32), categories=keep))
