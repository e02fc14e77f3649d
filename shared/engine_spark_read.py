"""The Spark engine's I/O edge: open paths or catalog tables and apply `audit.load`'s rules as Spark columns.

Mirrors `audit.read` / `audit.load` rule for rule (ids byte-exact text, empty or null ids set
aside, earliest first-seen row kept, the as-of cut, the same notes and errors with sample rows),
but every row stays in Spark: only counts, level names and a few sample rows reach the driver.
The parity tests (tests/engines) hold the two readers to the same answers.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pyspark.sql import Column, DataFrame, SparkSession
from pyspark.sql import functions as F
from pyspark.sql import types as T

from armlock.assign import InputError

from .load import cutoff_of
from .read import (
    _FORMAT_WORDS,
    EPOCH_DIGITS,
    EPOCH_LIMIT_S,
    EPOCH_TEXT,
    MISSING_LEVEL,
    SHOW_ROWS,
    T_MAX_US,
    T_MIN_US,
    _need,
    bad_times,
    far_times,
    looks_like,
    strftime_regex,
)
from .engine import TABLE_PREFIX

_ZONE = r"([Zz]|[+-]\d\d(:?\d\d)?)$"
_NANOS = "spark.sql.legacy.parquet.nanosAsLong"  # on for the whole audit (SparkEngine.compute)
POS = ("_fidx", "_blk", "_mono")  # where a row sits in its input: file, split start, read order


class TableRef(str):
    """A catalog table as a 'path': prints as `table:db.name`, and is its own `.name` in notes."""

    @property
    def name(self) -> str:
        return str(self)


@dataclass
class SparkSource:
    """One input (file, directory or catalog table) and what it is for (`role`, e.g. "visits")."""

    ref: str
    role: str
    kind: str = ""  # csv | parquet | delta | table
    path: Any = None  # Path for files and directories, TableRef for tables (used in messages)
    ns_columns: set[str] = field(default_factory=set)  # Parquet nanosecond timestamps read as longs
    naive_ns: set[str] = field(default_factory=set)  # ... of which have no zone
    notes: list[str] = field(default_factory=list)  # notes made while opening (a byte-order mark)

    @property
    def is_csv(self) -> bool:
        return self.kind == "csv"

    def rows(self, positions: list[int], total: int | None = None) -> str:
        """'lines 3, 9 (and 4 more)' for CSV (the header is line 1) or 'rows 2, 8' otherwise."""
        pos = list(positions[:SHOW_ROWS])
        more = (total if total is not None else len(positions)) - len(pos)
        if self.is_csv:
            text = "line" + ("s" if len(pos) > 1 else "") + " " + ", ".join(str(p + 2) for p in pos)
        else:
            text = "row" + ("s" if len(pos) > 1 else "") + " " + ", ".join(str(p + 1) for p in pos)
        return text + (f" (and {more:,} more)" if more > 0 else "")


def col(name: str) -> Column:
    """A column by its exact name, whatever characters it holds."""
    return F.col("`" + name.replace("`", "``") + "`")


def _kind(path: Path, role: str) -> str:
    if path.is_dir():
        return "delta" if (path / "_delta_log").is_dir() else "parquet"
    name = path.name.lower()
    if name.endswith((".parquet", ".pq")):
        return "parquet"
    if name.endswith((".csv", ".csv.gz")):
        return "csv"
    raise InputError(f"{path}: cannot tell the format of the {role} file from its name; "
                     "use .csv, .csv.gz, .parquet, a Parquet or Delta directory, or table:db.name")


def _is_remote(ref: str) -> bool:
    return "://" in ref


def _ns_columns(src: SparkSource) -> None:
    """Parquet nanosecond timestamps (pandas' default) that Spark can only read as longs."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = Path(src.ref)
    files = sorted(path.rglob("*.parquet")) if path.is_dir() else [path]
    if not files:
        return
    try:
        schema = pq.read_schema(files[0])
    except (OSError, pa.ArrowException) as exc:
        raise InputError(f"{path}: cannot read the {src.role} file as Parquet: {exc}") from None
    for f in schema:
        if pa.types.is_timestamp(f.type) and f.type.unit == "ns":
            src.ns_columns.add(f.name)
            if f.type.tz is None:
                src.naive_ns.add(f.name)


def _refuses_nanos(spark: SparkSession, ref: str) -> bool:
    """Whether Spark refuses the files' nanosecond timestamps when it is not told to read them as longs."""
    spark.conf.set(_NANOS, "false")
    try:
        _ = spark.read.parquet(ref).schema
        return False
    except Exception as exc:  # Spark's own error classes differ between versions
        return "NANOS" in str(exc)
    finally:
        spark.conf.set(_NANOS, "true")


def open_source(spark: SparkSession, ref: str, role: str, delimiter: str = ",") -> tuple[SparkSource, DataFrame]:
    """The input as a DataFrame with its own columns plus POS; raises InputError if it cannot be read."""
    ref = str(ref)
    if ref.startswith(TABLE_PREFIX):
        name = ref[len(TABLE_PREFIX):]
        src = SparkSource(ref, role, "table", TableRef(ref))
        if not spark.catalog.tableExists(name):
            raise InputError(f"{ref}: {role} table not found in the Spark catalog")
        df = spark.table(name)
    else:
        path = Path(ref)
        if not _is_remote(ref) and not path.exists():
            raise InputError(f"{path}: {role} file not found")
        kind = _kind(path, role) if not _is_remote(ref) else ("csv" if ".csv" in ref.lower() else "parquet")
        src = SparkSource(ref, role, kind, path)
        try:
            if kind == "csv":
                df = (spark.read.option("header", True).option("inferSchema", False).option("multiLine", True)
                      .option("escape", '"').option("encoding", "UTF-8").option("mode", "FAILFAST")
                      .option("sep", delimiter).csv(ref))
                if not df.columns:
                    raise InputError(f"{path}: the {role} file is empty (no header line)")
                first = df.columns[0]
                if first.startswith("\ufeff"):
                    df = df.withColumnRenamed(first, first[1:])
                    src.notes.append(f"{path.name}: a leading UTF-8 byte-order mark was removed (it is not data)")
            elif kind == "delta":
                df = spark.read.format("delta").load(ref)
            else:
                if not _is_remote(ref):
                    _ns_columns(src)
                elif _refuses_nanos(spark, ref):
                    src.ns_columns.add("*")  # which columns is unknown remotely: any integer time column
                df = spark.read.parquet(ref)  # the engine reads nanosecond timestamps as longs (_NANOS)
        except InputError:
            raise
        except Exception as exc:  # Spark raises its own analysis / runtime errors for unreadable input
            what = {"csv": "CSV", "delta": "Delta"}.get(kind, "Parquet")
            raise InputError(f"{path}: cannot read the {role} file as {what}: {_first_line(exc)}") from None
    files = sorted(df.inputFiles())
    fidx = (F.array_position(F.array(*[F.lit(f) for f in files]), F.input_file_name()) if len(files) > 1
            else F.lit(0))
    df = df.select("*", fidx.cast("int").alias("_fidx"), F.expr("input_file_block_start()").alias("_blk"),
                   F.monotonically_increasing_id().alias("_mono"))
    return src, df


_ARROW_NAMES: dict[type[T.DataType], str] = {T.ByteType: "int8", T.ShortType: "int16", T.IntegerType: "int32", T.LongType: "int64",
                T.FloatType: "float", T.DoubleType: "double"}


def _arrow_name(dtype: T.DataType) -> str:
    """A numeric type as pyarrow names it (the pandas engine's messages quote Arrow's names)."""
    if isinstance(dtype, T.DecimalType):
        return f"decimal128({dtype.precision}, {dtype.scale})"
    return _ARROW_NAMES.get(type(dtype), dtype.simpleString())


def _first_line(exc: Exception) -> str:
    return (str(exc).strip().splitlines() or [type(exc).__name__])[0][:300]


def present_columns(df: DataFrame) -> list[str]:
    return [c for c in df.columns if c not in POS]


def positions(df: DataFrame, flag: Column, limit: int = SHOW_ROWS) -> list[int]:
    """0-based positions in the input (file order) of the first `limit` rows where `flag` holds."""
    splits = (df.groupBy("_fidx", "_blk").agg(F.count(F.lit(1)).alias("n"), F.min("_mono").alias("lo"))
              .orderBy("_fidx", "_blk").collect())
    offset, starts = 0, {}
    for r in splits:
        starts[(r["_fidx"], r["_blk"])] = (offset, r["lo"])
        offset += r["n"]
    hits = df.where(flag).select(*POS).orderBy(*POS).limit(limit).collect()
    return [starts[(h["_fidx"], h["_blk"])][0] + h["_mono"] - starts[(h["_fidx"], h["_blk"])][1] for h in hits]


def _text(c: Column, dtype: T.DataType) -> Column:
    return c if isinstance(dtype, T.StringType) else c.cast("string")


def ids_column(src: SparkSource, df: DataFrame, name: str, notes: list[str] | None) -> Column:
    """Ids as text, "" for null; integers noted and hashed as their decimal text; other types refused."""
    dtype = df.schema[name].dataType
    if isinstance(dtype, (T.ByteType, T.ShortType, T.IntegerType, T.LongType)):
        if notes is not None:
            notes.append(f"{src.path.name}: ids in '{name}' are integers; hashed as their decimal text")
    elif not isinstance(dtype, T.StringType):
        raise InputError(f"{src.path}: column '{name}' holds {dtype.simpleString()}, not text ids; export the ids "
                         "as text exactly as the site stores them")
    return F.coalesce(_text(col(name), dtype), F.lit(""))


def labels_column(df: DataFrame, name: str) -> Column:
    """A categorical column as text; empty or null becomes MISSING_LEVEL."""
    t = _text(col(name), df.schema[name].dataType)
    return F.when(t.isNull() | (t == ""), F.lit(MISSING_LEVEL)).otherwise(t)


def times_column(src: SparkSource, df: DataFrame, name: str, notes: list[str], fmt: str = "iso8601",
                 setting: str = "") -> Column:
    """Microseconds since the epoch (UTC), null for empty cells; the same rules, notes and errors as `read_times`.

    `fmt` ("iso8601", "epoch_seconds", "epoch_milliseconds" or a strftime pattern) applies to text and
    numbers; timestamps and dates are read as they are. `setting` names the spec key, for the messages.
    """
    dtype = df.schema[name].dataType
    where = setting or "the column's time format"
    typed = None
    if (name in src.ns_columns or "*" in src.ns_columns) and isinstance(dtype, T.LongType):
        if name in src.naive_ns:
            notes.append(f"{src.path.name}: times in '{name}' have no zone; read as UTC")
        q = "`" + name.replace("`", "``") + "`"
        typed = F.expr(f"({q} - pmod({q}, 1000)) div 1000")
    elif isinstance(dtype, T.TimestampType):
        typed = F.unix_micros(col(name))
    elif isinstance(dtype, T.TimestampNTZType):
        notes.append(f"{src.path.name}: times in '{name}' have no zone; read as UTC")
        typed = F.unix_micros(col(name).cast("timestamp"))
    elif isinstance(dtype, T.DateType):
        notes.append(f"{src.path.name}: '{name}' holds dates without a time; read as midnight UTC")
        typed = F.unix_micros(col(name).cast("timestamp"))
    if typed is not None:
        probe = df.select(typed.alias("_t"), *POS)
        _no_far_times(src, probe, name, int(probe.agg(F.sum(_far().cast("long"))).collect()[0][0] or 0))
        return typed
    numeric = isinstance(dtype, T.NumericType) and not isinstance(dtype, T.DecimalType)  # as read_times
    if numeric and fmt not in EPOCH_DIGITS:
        first = df.where(col(name).isNotNull()).select(col(name)).limit(1).collect()
        hint = looks_like(str(first[0][0])) if first else "holds numbers"
        raise InputError(f"{src.path}: column '{name}' holds numbers ({_arrow_name(dtype)}), not "
                         f"{_FORMAT_WORDS.get(fmt, fmt)} times; it {hint} in {where}")
    if not (numeric or isinstance(dtype, T.StringType)):
        raise InputError(f"{src.path}: column '{name}' holds {_arrow_name(dtype)}, not times "
                         "(use ISO 8601 text or timestamps)")
    if fmt not in EPOCH_DIGITS and fmt != "iso8601":
        try:
            strftime_regex(fmt)
        except ValueError as exc:
            raise InputError(f"{src.path}: column '{name}' uses the time format {fmt!r} ({where}); the Spark engine "
                             f"reads the strftime directives %Y %m %d %H %M %S %f (and %%), not {exc}: convert the "
                             "column, or use --engine pandas") from None
    # text: what a message shows (the trimmed text; a number as the double pandas prints)
    text = col(name).cast("double") if numeric else F.trim(F.coalesce(col(name), F.lit("")))
    probe = df.select(text.alias("_t_text"), col(name).alias("_t_raw"), *POS)
    blank, parsed = _parser(fmt, dtype, F.col("_t_text"), F.col("_t_raw"))
    probe = probe.select("*", parsed.alias("_t"), blank.alias("_blank"))
    flag = ~F.col("_blank") & F.col("_t").isNull()
    naive = F.sum((~F.col("_blank") & (~F.col("_t_text").rlike(_ZONE) if fmt == "iso8601" else F.lit(True)))
                  .cast("long"))
    stats = probe.agg(F.sum(flag.cast("long")).alias("bad"), naive.alias("naive"),
                      F.sum(_far().cast("long")).alias("far")).collect()[0]
    bad, n_naive = int(stats["bad"] or 0), int(stats["naive"] or 0)
    if bad:
        hits = probe.where(flag).orderBy(*POS).select("_t_text").limit(100).collect()
        samples = [str(float(r[0])) if numeric else r[0] for r in hits]
        raise bad_times(src, name, bad, src.rows(positions(probe, flag), bad), samples, fmt, where)  # type: ignore[arg-type]
    _no_far_times(src, probe, name, int(stats["far"] or 0))
    if n_naive and fmt == "iso8601":
        notes.append(f"{src.path.name}: {n_naive:,} time(s) in '{name}' have no zone; read as UTC")
    elif n_naive and fmt not in EPOCH_DIGITS:  # the patterns read here have no zone directive
        notes.append(f"{src.path.name}: times in '{name}' ({fmt!r}) have no zone; read as UTC")
    blank, parsed = _parser(fmt, dtype, text, col(name))
    return F.when(blank, F.lit(None)).otherwise(parsed)


def _far() -> Column:
    """True for a time (`_t`, microseconds) outside the years 1678-2261, which the pandas engine cannot hold."""
    return F.col("_t").isNotNull() & ((F.col("_t") < F.lit(T_MIN_US)) | (F.col("_t") >= F.lit(T_MAX_US)))


def _no_far_times(src: SparkSource, probe: DataFrame, name: str, n: int) -> None:
    """`audit.read.far_times` when `n` times (microseconds in the probe's `_t`) lie outside 1678-2261."""
    if n:
        first = probe.where(_far()).orderBy(*POS).select("_t").first()[0]  # type: ignore[index]
        example = pd.Timestamp(np.datetime64(int(first), "us")).tz_localize("UTC")
        raise far_times(src, name, n, src.rows(positions(probe, _far()), n), example)


def _parser(fmt: str, dtype: T.DataType, text: Column, raw: Column) -> tuple[Column, Column]:
    """(blank, microseconds or null when it does not parse) of one time column, from its text and raw value."""
    if fmt == "iso8601":
        return text == "", F.unix_micros(text.try_cast("timestamp"))
    if fmt in EPOCH_DIGITS:
        return _epoch(fmt, dtype, text, raw)
    return text == "", _strftime(fmt, text)


def _epoch(fmt: str, dtype: T.DataType, text: Column, raw: Column) -> tuple[Column, Column]:
    """`audit.read.epoch_micros`' rule in Spark: integers exact, decimal text digit by digit, floats rounded down."""
    unit = 10 ** EPOCH_DIGITS[fmt]
    limit = EPOCH_LIMIT_S * 10**6
    if isinstance(dtype, T.IntegralType):
        return raw.isNull(), F.when(F.abs(raw.cast("double")) * unit < limit, raw.cast("long") * unit)
    if isinstance(dtype, T.NumericType):  # float, double: one correctly rounded product, then floor
        v = raw.cast("double") * F.lit(float(unit))
        return text.isNull() | F.isnan(text), F.when(~F.isnan(v) & (F.abs(v) < limit), F.floor(v).cast("long"))
    digits = EPOCH_DIGITS[fmt]
    part = lambda i: F.regexp_extract(text, _EPOCH_J, i)  # noqa: E731
    whole = part(2).try_cast("long")
    frac = F.rpad(F.substring(part(3), 1, digits), digits, "0").cast("long")
    us = whole * unit + frac
    ok = text.rlike(_EPOCH_J) & (whole < F.lit(int(limit // unit)))
    return text == "", F.when(ok, F.when(part(1) == "-", -us).otherwise(us))


_EPOCH_J = EPOCH_TEXT.replace("?P<sign>", "").replace("?P<whole>", "").replace("?P<frac>", "")  # Java: no names


def _strftime(fmt: str, text: Column) -> Column:
    """A strftime pattern read by the regular expression pandas' strptime uses, then an exact timestamp."""
    pattern, order = strftime_regex(fmt)
    got = {d: F.regexp_extract(text, pattern, i + 1) for i, d in enumerate(order)}

    def num(d: str, default: int) -> Column:
        return F.trim(got[d]).cast("int") if d in got else F.lit(default)

    micros = F.lit(0) if "f" not in got else F.rpad(F.substring(got["f"], 1, 6), 6, "0").cast("long")
    secs = num("S", 0).cast("decimal(8,6)") + (micros / F.lit(1_000_000)).cast("decimal(8,6)")
    stamp = F.try_make_timestamp(num("Y", 1900), num("m", 1), num("d", 1), num("H", 0), num("M", 0), secs,
                                 F.lit("UTC"))
    # strptime's %S takes 60 and 61 but no time has them (pandas refuses them); Spark would roll them over
    return F.when(text.rlike(pattern) & (num("S", 0) < 60), F.unix_micros(stamp))


def numbers_column(src: SparkSource, df: DataFrame, name: str) -> Column:
    """A numeric covariate as double (null for empty cells); text that is not a number raises."""
    dtype = df.schema[name].dataType
    if isinstance(dtype, (T.NumericType, T.BooleanType)):
        return col(name).cast("double")
    if not isinstance(dtype, T.StringType):
        raise InputError(f"{src.path}: column '{name}' holds {dtype.simpleString()}, not numbers")
    text = F.trim(F.coalesce(col(name), F.lit("")))
    probe = df.select(text.alias("_n_text"), *POS).select("*", F.col("_n_text").try_cast("double").alias("_n"))
    flag = (F.col("_n_text") != "") & F.col("_n").isNull()
    bad = probe.where(flag).count()
    if bad:
        sample = probe.where(flag).orderBy(*POS).select("_n_text").first()[0]  # type: ignore[index]
        raise InputError(f"{src.path}: column '{name}' has {bad:,} value(s) that are not numbers "
                         f"(first: {src.rows(positions(probe, flag), bad)}; e.g. {sample!r})")
    return F.when(text == "", F.lit(None)).otherwise(text.try_cast("double"))


def note_empty(src: SparkSource, df: DataFrame, flag: Column, n: int, name: str, what: str,
               notes: list[str]) -> int:
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) with an empty or null '{name}' "
                     f"({src.rows(positions(df, flag), n)}) were set aside: {what}")
    return n


def need(src: SparkSource, df: DataFrame, wanted: dict[str, str], table: str) -> None:
    _need(src, present_columns(df), wanted, table)  # type: ignore[arg-type]


def as_of_cut(as_of: date) -> int:
    """The as-of cut-off in microseconds since the epoch."""
    return int(cutoff_of(as_of).value // 1000)
