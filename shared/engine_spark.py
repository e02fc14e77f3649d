"""The Spark engine: every row-level step in Spark, only the small tables of `audit.tables` come back.

De-duplication, the as-of cut and the set-aside rows follow `audit.load` (see engine_spark_load);
each unit's arm is recomputed with Spark's native xxhash64 through the very expression that
`armlock assign --sql spark` prints (`assign.sql.spark_arm_expr`); exposures and identity links
are joined to the units in Spark; every count, distinct count and exact sum is a Spark aggregate.
The driver receives tables whose size depends on days, levels, campaigns and weeks, never on
units or rows, and hands them to the same statistics as the pandas engine.
"""

from __future__ import annotations

import warnings
from collections import defaultdict
from collections.abc import Callable, Generator, Iterable
from datetime import date
from fractions import Fraction
from typing import Any

import pandas as pd
from pyspark.sql import Column, DataFrame, SparkSession
from pyspark.sql import functions as F

from armlock.assign import InputError, Spec
from armlock.assign.sql import spark_arm_expr, spark_string_literal

from .engine import EngineResult, Inputs, ReadoutResult, file_bytes, readout_builder
from .engine_pandas import HASH_LIKE, PREFIX_MAX, _cuts
from .engine_spark_batch import Builder, Rows, together
from .engine_spark_load import US_DAY, SparkFrames, day_of, load_exposures, load_identities, load_visits
from .exactsum import exact_total, rounded_mean, to_float
from .tables import (
    NUMERIC_COLUMNS,
    AuditTables,
    BalanceTables,
    ChurnTables,
    IntegrityTables,
    LeakageTables,
    SplitTables,
)

# PySpark warns about a pandas newer than it was tested with; the engine never converts frames.
warnings.filterwarnings("ignore", message="PySpark does not yet fully support pandas", category=FutureWarning)

_TZ = "spark.sql.session.timeZone"
_NANOS = "spark.sql.legacy.parquet.nanosAsLong"
_PARTITIONS = "spark.sql.shuffle.partitions"


class SparkEngine:
    """Runs on the active SparkSession (a notebook, a `spark-submit` job), else starts one."""

    name = "spark"

    def __init__(self, master: str | None = None, conf: dict[str, str] | None = None,
                 session: SparkSession | None = None) -> None:
        self.master, self.conf, self.session = master, dict(conf or {}), session

    def spark(self) -> SparkSession:
        if self.session is not None:
            return self.session
        active = SparkSession.getActiveSession()
        if active is not None:
            return active
        builder = SparkSession.builder.master(self.master or "local[*]").appName("armlock-audit")
        # Spark's console progress bars would interleave with armlock's own on the terminal
        for key, value in {"spark.ui.showConsoleProgress": "false", **self.conf}.items():
            builder = builder.config(key, value)
        session = builder.getOrCreate()
        ctx = session.sparkContext
        if (ctx.master or "").startswith("local"):  # one machine, a terminal run
            ctx.setLogLevel("ERROR")  # Spark's warnings about plans and host names are noise here
            if not ctx.getConf().contains(_PARTITIONS):
                # Spark's default of 200 shuffle partitions is meant for clusters: on one machine each
                # group-by and join then runs 200 tiny tasks (the demo's audit took 180 s, against 43 s
                # with one per core). A value set in --spark-conf or spark-defaults.conf is kept.
                session.conf.set(_PARTITIONS, str(max(ctx.defaultParallelism, 1)))
        return session

    def compute(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> EngineResult:
        return self._run(spec, inputs, as_of, advance)[0]

    def readout(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> ReadoutResult:
        """The audit's tables and, from the same loaded frames, the readout's (`readout.engine_spark`)."""
        readout_tables = readout_builder(self.name)
        if inputs.orders is None:
            raise InputError("a readout needs the orders log (--orders)")
        audit, extra = self._run(spec, inputs, as_of, advance, readout_tables)
        tables, notes = extra
        return ReadoutResult(audit=audit, tables=tables, notes=notes)

    def _run(self, spec: Spec, inputs: Inputs, as_of: date | None, advance: Callable[[int], None],
             then: Callable[..., Any] | None = None) -> tuple[EngineResult, Any]:
        """Load and count the audit's tables; `then(spark, spec, inputs, fr, as_of, advance)` runs on the
        loaded frames, in the same session settings, before the cached frames are released."""
        spark = self.spark()
        saved = {k: spark.conf.get(k, None) for k in (_TZ, _NANOS)}
        spark.conf.set(_TZ, "UTC")  # days, weeks and zone-less text times are UTC, as in the pandas engine
        spark.conf.set(_NANOS, "true")  # pandas' nanosecond Parquet timestamps: read as longs, converted exactly
        fr = SparkFrames()
        extra = None
        try:
            used = load_visits(spark, spec, str(inputs.visits), as_of, fr)
            advance(file_bytes(inputs.visits))
            if inputs.exposures is not None:
                load_exposures(spark, spec, str(inputs.exposures), used, fr)
                advance(file_bytes(inputs.exposures))
            if inputs.identities is not None:
                load_identities(spark, spec, str(inputs.identities), used, fr)
                advance(file_bytes(inputs.identities))
            if then is not None:  # before the audit's tables, so that a bad orders file is told early
                extra = then(spark, spec, inputs, fr, used, advance)
            tables = compute_tables(spec, fr)
            audit = EngineResult(tables=tables, as_of=used, notes=list(fr.notes), counts=dict(fr.counts),
                                 data_through=fr.data_through)
        finally:
            for key, value in saved.items():
                if value is None:
                    spark.conf.unset(key)
                else:
                    spark.conf.set(key, value)
            for frame in fr.cached:
                frame.unpersist()
        return audit, extra


# -- the arm, natively -------------------------------------------------------------------------------

def _names(spec: Spec) -> str:
    return "array(" + ", ".join(spark_string_literal(a) for a in spec.arm_names) + ")"


def hashed_index(spec: Spec, id_column: str = "_unit") -> Column:
    """The arm index (spec order) the contract gives an id: `assign --sql spark`'s expression, natively."""
    return F.expr(f"array_position({_names(spec)}, {spark_arm_expr(spec, id_column)}) - 1").cast("int")


def recorded_index(spec: Spec) -> Column:
    """Recorded arm -> spec index; -1 for an unknown name, -2 for an empty one."""
    pos = F.expr(f"array_position({_names(spec)}, _arm)")
    return (F.when(pos > 0, pos - 1).when(F.col("_arm") == "(missing)", -2).otherwise(-1)).cast("int")


def _floor_div(c: Column, d: int) -> Column:
    return ((c - F.pmod(c, F.lit(d))) / F.lit(d)).cast("long")  # exact: the division is by a divisor


def _label(d: int) -> str:
    return day_of(d * US_DAY).isoformat()


# -- exact sums in Spark (see audit.exactsum) --------------------------------------------------------

def _scale(v: Column, s: Column) -> Column:
    """v * 2**s, exactly, in two steps so that no power of two overflows."""
    h = F.floor(s / 2)
    return v * F.pow(F.lit(2.0), h) * F.pow(F.lit(2.0), s - h)


def exact_parts_cols(x: Column) -> tuple[Column, Column]:
    """(e, m) with x = m * 2**e and m an integer below 2**53 (x finite and non-zero)."""
    a = F.abs(x)
    e0 = F.floor(F.log2(a)).cast("int")
    r = _scale(a, -e0)
    e = e0 + F.when(r >= 2, 1).when(r < 1, -1).otherwise(0)
    m = _scale(x, F.lit(52) - e).cast("long").cast("decimal(38,0)")
    return (e - 52).cast("int"), m


def exact_sums_query(frame: DataFrame, keys: list[str], value: str) -> DataFrame:
    """The aggregate behind `exact_sums`: integer mantissa sums per keys and binary exponent."""
    e, m = exact_parts_cols(F.col(value))
    x = F.col(value)
    return (frame.where(x.isNotNull() & ~F.isnan(x) & (F.abs(x) != float("inf")) & (x != 0))
            .select(*keys, e.alias("_e"), m.alias("_m")).groupBy(*keys, "_e").agg(F.sum("_m").alias("_s")))


def exact_sums_of(parts: Iterable[Any], keys: list[str]) -> dict[tuple, Fraction]:
    """`exact_sums_query`'s rows -> {keys: exact sum} as Fractions."""
    acc: dict[tuple, list[tuple[int, int]]] = defaultdict(list)
    for r in parts:
        acc[tuple(r[k] for k in keys)].append((int(r["_e"]), int(r["_s"])))
    return {k: exact_total(v) for k, v in acc.items()}


def exact_sums(frame: DataFrame, keys: list[str], value: str) -> dict[tuple, Fraction]:
    """{keys: exact sum of `value`} as Fractions (finite, non-zero values only), in one job of its own."""
    return exact_sums_of(exact_sums_query(frame, keys, value).collect(), keys)


# -- the tables ----------------------------------------------------------------------------------------

def compute_tables(spec: Spec, fr: SparkFrames) -> AuditTables:
    """All sufficient statistics of one audit, from the loaded Spark frames."""
    assert fr.visits is not None
    v = (fr.visits.withColumn("_rec", recorded_index(spec)).withColumn("_hashed", hashed_index(spec))
         .withColumn("_eff", F.when(F.col("_rec") >= 0, F.col("_rec")).otherwise(F.col("_hashed")))
         .withColumn("_mis", (F.col("_rec") >= 0) & (F.col("_rec") != F.col("_hashed")))
         .withColumn("_day", _floor_div(F.col("_t"), US_DAY))).cache()
    fr.cached.append(v)
    # every aggregate of every table goes to Spark in two collects (engine_spark_batch); split and
    # integrity come first: leakage reads the arm counts (fr.arm_pairs) they leave behind
    builders: list[Builder] = [split_and_integrity(spec, fr, v),
                               _numeric(spec, fr, v.where(F.col("_rec") >= 0), len(spec.arms))]
    if fr.exposures is not None:
        builders.append(leakage_tables(spec, fr, v))
    if fr.identities is not None:
        builders.append(churn_tables(spec, fr, v))
    (split, integ, lab), numeric, *rest = together(*builders)
    tables = AuditTables(split=split, integrity=integ, balance=balance_tables(spec, fr, lab, numeric))
    if fr.exposures is not None:
        tables.leakage = rest.pop(0)
    if fr.identities is not None:
        tables.churn = rest.pop(0)
    return tables


def _label_query(fr: SparkFrames, v: DataFrame) -> DataFrame | None:
    """Units per (label column, level, recorded, recomputed) for every label column, in one pass."""
    cols = list(fr.labels.values()) + (["_fp"] if fr.has_fp else [])
    if not cols:
        return None
    pairs = F.explode(F.array(*[F.struct(F.lit(c).alias("c"), F.col(c).alias("v")) for c in cols]))
    return v.select("_rec", "_hashed", pairs.alias("p")).groupBy("p.c", "p.v", "_rec", "_hashed").count()


def _label_counts(fr: SparkFrames, rows: Rows) -> dict[str, dict[tuple[str, int, int], int]]:
    """{label column: {(level, recorded, recomputed): units}} from `_label_query`'s rows."""
    out: dict[str, dict[tuple[str, int, int], int]] = {c: {} for c in [*fr.labels.values(), "_fp"]}
    for r in rows:
        out[r["c"]][(r["v"], r["_rec"], r["_hashed"])] = int(r["count"])
    return out


def _crosstab(counts: dict[tuple[str, int, int], int], levels: list[str], arms: list[str]) -> pd.DataFrame:
    grid = {lv: [0] * len(arms) for lv in levels}
    for (lv, rec, _), n in counts.items():
        if rec >= 0:
            grid[lv][rec] += n
    return pd.DataFrame([grid[lv] for lv in levels], index=pd.Index(levels, name="level"), columns=arms,
                        dtype="int64")


def _units_mis(counts: dict[tuple[str, int, int], int], levels: list[str]) -> pd.DataFrame:
    units = dict.fromkeys(levels, 0)
    mis = dict.fromkeys(levels, 0)
    for (lv, rec, hashed), n in counts.items():
        units[lv] += n
        if rec >= 0 and rec != hashed:
            mis[lv] += n
    return pd.DataFrame({"units": [units[x] for x in levels], "mismatches": [mis[x] for x in levels]},
                        index=pd.Index(levels, name="level"), dtype="int64")


def _iso(us: int) -> str:
    return pd.Timestamp(int(us), unit="us", tz="UTC").isoformat()


LabelCounts = dict[str, dict[tuple[str, int, int], int]]


def split_and_integrity(spec: Spec, fr: SparkFrames,
                        v: DataFrame) -> Generator[list[DataFrame], list[Rows], tuple[SplitTables, IntegrityTables,
                                                                                       LabelCounts]]:
    """The split and integrity tables, and the label counts the balance check shares (a builder)."""
    arms, k = list(spec.arm_names), len(spec.arms)
    start_us = int(pd.Timestamp(spec.start).value // 1000)
    gq = v.groupBy("_arm", "_rec", "_hashed", "_day").agg(
        F.count(F.lit(1)).alias("count"), F.sum((F.col("_t") < start_us).cast("long")).alias("pre"),
        F.min("_t").alias("lo"), F.max("_t").alias("hi"))
    lq = _label_query(fr, v)
    got = yield [gq] + ([lq] if lq is not None else [])
    g = got[0]
    lab = _label_counts(fr, got[1] if lq is not None else [])
    days = sorted({int(r["_day"]) for r in g})
    dpos = {d: i for i, d in enumerate(days)}
    daily = [[0] * k for _ in days]
    by_day = [[0, 0] for _ in days]
    units, pairs = [0] * k, [0] * (k * k)
    unknown: dict[str, int] = {}
    missing = 0
    fr.arm_pairs = {}
    for r in g:
        rec, hashed, n, i = r["_rec"], r["_hashed"], int(r["count"]), dpos[int(r["_day"])]
        fr.arm_pairs[(rec, hashed)] = fr.arm_pairs.get((rec, hashed), 0) + n
        by_day[i][0] += n
        if rec >= 0:
            units[rec] += n
            daily[i][rec] += n
            if rec != hashed:
                by_day[i][1] += n
                pairs[rec * k + hashed] += n
        elif rec == -1:
            unknown[r["_arm"]] = unknown.get(r["_arm"], 0) + n
        else:
            missing += n
    labels = [_label(d) for d in days]
    daily_df = pd.DataFrame(daily, index=pd.Index(labels, name="date"), columns=arms, dtype="int64")
    by_day_df = pd.DataFrame(by_day, index=pd.Index(labels, name="date"), columns=["units", "mismatches"],
                             dtype="int64")
    pairs_df = pd.DataFrame([{"recorded": arms[i // k], "recomputed": arms[i % k], "units": n}
                             for i, n in enumerate(pairs) if n > 0], columns=["recorded", "recomputed", "units"])
    segs, by_seg = {}, {}
    for name in spec.audit.segments:
        c = fr.labels[name]
        segs[name] = _crosstab(lab[c], fr.levels[c], arms)
        by_seg[name] = _units_mis(lab[c], fr.levels[c])
    fps = None
    if fr.has_fp:
        acc: dict[str, int] = {}
        for (lv, _, _), n in lab["_fp"].items():
            acc[lv] = acc.get(lv, 0) + n
        fps = {a: n for a, n in acc.items() if n > 0}
    integ = IntegrityTables(
        units=sum(int(r["count"]) for r in g), recorded_unknown=unknown, recorded_missing=missing,
        mismatches=sum(pairs), pairs=pairs_df, by_day=by_day_df, by_segment=by_seg,
        pre_start=sum(int(r["pre"]) for r in g), first_seen_min=_iso(min(r["lo"] for r in g)),
        first_seen_max=_iso(max(r["hi"] for r in g)), fingerprints=fps)
    split = SplitTables(arms=arms, units=dict(zip(arms, units)), daily=daily_df, segments=segs)
    return split, integ, lab


def balance_tables(spec: Spec, fr: SparkFrames, lab: LabelCounts, rows: list[dict[str, object]]) -> BalanceTables:
    """The categorical crosstabs (from the label counts) and the numeric rows (from `_numeric`)."""
    arms = list(spec.arm_names)
    cats = {name: _crosstab(lab[fr.labels[name]], fr.levels[fr.labels[name]], arms)
            for name in spec.audit.categorical_covariates}
    return BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS), categorical=cats)


def _finite(x: Column) -> Column:
    return x.isNotNull() & ~F.isnan(x) & (F.abs(x) != float("inf"))


def _numeric(spec: Spec, fr: SparkFrames, ok: DataFrame,
             k: int) -> Generator[list[DataFrame], list[Rows], list[dict[str, object]]]:
    """n, missing, invalid, mean, m2, rank_sum, ties, binary per covariate and arm (see audit.tables).

    A builder of two rounds: counts, exact sums and ranks; then the squared deviations from the means."""
    arms = list(spec.arm_names)
    covs = list(fr.numbers.items())
    if not covs:
        return []
    aggs = []
    for i, (_, c) in enumerate(covs):
        x = F.col(c)
        nan = x.isNull() | F.isnan(x)
        aggs += [F.sum(_finite(x).cast("long")).alias(f"n{i}"), F.sum(nan.cast("long")).alias(f"miss{i}"),
                 F.sum((~nan & ~_finite(x)).cast("long")).alias(f"inv{i}"),
                 F.sum((_finite(x) & ~x.isin(0.0, 1.0)).cast("long")).alias(f"nb{i}")]
    long = ok.select("_rec", F.explode(F.array(*[F.struct(F.lit(i).alias("cov"), F.col(c).alias("x"))
                                                 for i, (_, c) in enumerate(covs)])).alias("p")
                     ).select("_rec", "p.cov", "p.x")
    long = long.where(_finite(F.col("x")))
    ranked = _ranked(long, k)
    per_arm_rows, sum_rows, rank_rows, cube_rows = yield [
        ok.groupBy("_rec").agg(*aggs), exact_sums_query(long, ["cov", "_rec"], "x"), _rank_query(ranked, k),
        exact_sums_query(_cubes(ranked), ["cov"], "t")]
    per_arm = {r["_rec"]: r for r in per_arm_rows}
    sums = exact_sums_of(sum_rows, ["cov", "_rec"])

    def n_of(i: int, a: int) -> int:
        r = per_arm.get(a)
        return int(r[f"n{i}"] or 0) if r is not None else 0

    means = {(i, a): rounded_mean(sums.get((i, a), Fraction(0)), n_of(i, a)) for i in range(len(covs)) for a in range(k)}
    mean_col = F.lit(None).cast("double")
    for (i, a), m in means.items():
        if m == m:  # not NaN
            mean_col = F.when((F.col("cov") == i) & (F.col("_rec") == a), F.lit(m)).otherwise(mean_col)
    dev = long.select("cov", "_rec", ((F.col("x") - mean_col) * (F.col("x") - mean_col)).alias("d2"))
    # a square that overflows (values near 1e308) makes m2 infinite, as in the pandas engine
    (m2_rows, inf_rows) = yield [exact_sums_query(dev, ["cov", "_rec"], "d2"),
                                 dev.where(F.abs(F.col("d2")) == float("inf")).groupBy("cov", "_rec").count()]
    m2 = exact_sums_of(m2_rows, ["cov", "_rec"])
    m2.update({(r["cov"], r["_rec"]): float("inf") for r in inf_rows})
    ranks = _rank_sums(rank_rows, k)
    ties = exact_sums_of(cube_rows, ["cov"])
    out = []
    for i, (name, _) in enumerate(covs):
        n_all = sum(n_of(i, a) for a in range(k))
        nb = sum(int((per_arm[a][f"nb{i}"] or 0)) for a in per_arm)
        binary = bool(n_all) and nb == 0
        bad = sum(int(per_arm[a][f"inv{i}"] or 0) for a in per_arm)
        if bad:
            fr.notes.append(f"covariate {name}: {bad} value(s) were +/-infinity; counted as invalid input and "
                            "left out of the balance check")
        for a in range(k):
            r = per_arm.get(a)
            out.append({"covariate": name, "arm": arms[a], "n": n_of(i, a),
                        "missing": int(r[f"miss{i}"] or 0) if r is not None else 0,
                        "invalid": int(r[f"inv{i}"] or 0) if r is not None else 0,
                        "mean": means[(i, a)], "m2": to_float(m2.get((i, a), 0)),
                        "rank_sum": float(ranks.get((i, a), 0)), "ties": float(ties.get((i,), 0)),
                        "binary": binary})
    return out


def _ranked(long: DataFrame, k: int) -> DataFrame:
    """Per covariate and distinct value: units per arm, c (all arms) and the units below it (pooled ranks)."""
    from pyspark.sql.window import Window

    per_value = long.groupBy("cov", "x").pivot("_rec", list(range(k))).count().na.fill(0)
    c = sum((F.col(str(a)) for a in range(k)), F.lit(0))
    w = Window.partitionBy("cov").orderBy("x").rowsBetween(Window.unboundedPreceding, -1)
    return per_value.select("cov", *[str(a) for a in range(k)], c.alias("c"),
                            F.coalesce(F.sum(c).over(w), F.lit(0)).alias("below"))


def _rank_query(ranked: DataFrame, k: int) -> DataFrame:
    """Twice the rank sum per covariate and arm (ties share their mean rank), as exact integers."""
    twice = (2 * F.col("below") + F.col("c") + 1).cast("decimal(38,0)")  # twice the average rank: an integer
    return ranked.groupBy("cov").agg(*[F.sum(F.col(str(a)).cast("decimal(38,0)") * twice).alias(f"r{a}")
                                       for a in range(k)])


def _cubes(ranked: DataFrame) -> DataFrame:
    """c^3 - c per tied value (the tie correction's terms)."""
    return ranked.select("cov", (F.col("c").cast("double") * F.col("c") * F.col("c") - F.col("c")).alias("t"))


def _rank_sums(rows: Rows, k: int) -> dict[tuple, Fraction]:
    ranks: dict[tuple, Fraction] = {}
    for r in rows:
        for a in range(k):
            ranks[(r["cov"], a)] = exact_total([(-1, int(r[f"r{a}"] or 0))])
    return ranks


def _count_by(rows: Iterable, key: str) -> dict:
    return {r[key]: int(r["count"]) for r in rows}


def leakage_tables(spec: Spec, fr: SparkFrames, v: DataFrame) -> Generator[list[DataFrame], list[Rows], LeakageTables]:
    """Exposures against the units: by arm, holdout leakage by campaign and week, unseen ids (a builder)."""
    assert fr.exposures is not None
    arms, k = list(spec.arm_names), len(spec.arms)
    hold = [arms.index(a) for a in spec.holdout_arms]
    start_us = int(pd.Timestamp(spec.start).value // 1000)
    j = fr.exposures.join(v.select("_unit", F.col("_t").alias("_fs"), "_eff"), "_unit", "left")
    seen = F.col("_fs").isNotNull()
    bs = seen & (F.col("_t") < start_us)
    ba = seen & (F.col("_t") < F.col("_fs")) & ~bs
    during = seen & ~(bs | ba)
    j = j.select("_unit", "_t", "_camp", "_kind", "_eff", seen.alias("_seen"), bs.alias("_bs"), ba.alias("_ba"),
                 during.alias("_dur"), (during & F.col("_eff").isin(hold)).alias("_leak")).cache()
    fr.cached.append(j)
    per_unit = (j.where("_seen").groupBy("_unit")
                .agg(F.max(F.col("_dur").cast("int")).alias("d"), F.max((~F.col("_dur")).cast("int")).alias("p"),
                     F.max(F.col("_bs").cast("int")).alias("bs"), F.max(F.col("_ba").cast("int")).alias("ba"),
                     F.first("_eff").alias("_eff")))
    leak = j.where("_leak")
    kinds = [F.sum((F.col("_kind") == 0).cast("long")).alias("impressions"),
             F.sum((F.col("_kind") == 1).cast("long")).alias("clicks")]
    week = _floor_div(_floor_div(F.col("_t"), US_DAY) + 3, 7)
    uns = j.where(~F.col("_seen")).select("_unit").distinct().cache()
    fr.cached.append(uns)
    rows, days, pu, camp, wk, unseen, ur, vr = yield [
        j.groupBy("_seen", "_dur", "_eff", "_kind").count(),
        fr.exposures.groupBy(_floor_div(F.col("_t"), US_DAY).alias("d")).count(),
        per_unit.groupBy("_eff").agg(F.count(F.lit(1)).alias("n"), F.sum("d").alias("d"), F.sum("p").alias("p"),
                                     F.sum("bs").alias("bs"),
                                     F.sum(((F.col("ba") == 1) & (F.col("bs") == 0)).cast("long")).alias("ba")),
        leak.groupBy("_camp").agg(F.countDistinct("_unit").alias("units"), *kinds),
        leak.groupBy(week.alias("w")).agg(F.countDistinct("_unit").alias("units"), *kinds, F.min("_t").alias("first")),
        uns.select(hashed_index(spec).alias("a")).groupBy("a").count(),
        *_extremes(uns, v)]
    n_rows = sum(int(r["count"]) for r in rows)
    imp, clk = [0] * k, [0] * k
    pre_rows = unseen_rows = 0
    for r in rows:
        n = int(r["count"])
        if not r["_seen"]:
            unseen_rows += n
        elif not r["_dur"]:
            pre_rows += n
        elif r["_kind"] == 0:
            imp[r["_eff"]] += n
        elif r["_kind"] == 1:
            clk[r["_eff"]] += n
    exposed_u, pre_u = [0] * k, [0] * k
    for r in pu:
        exposed_u[r["_eff"]] = int(r["d"])
        pre_u[r["_eff"]] = int(r["p"])
    units = {a: 0 for a in range(k)}
    for (rec, hashed), n in fr.arm_pairs.items():
        units[rec if rec >= 0 else hashed] += n
    by_arm = pd.DataFrame({"units": [units.get(a, 0) for a in range(k)], "exposed_units": exposed_u,
                           "pre_exposed_units": pre_u, "impressions": imp, "clicks": clk},
                          index=pd.Index(arms, name="arm"), dtype="int64")
    by_campaign = pd.DataFrame([[int(r["units"]), int(r["impressions"]), int(r["clicks"])] for r in camp],
                               index=pd.Index([r["_camp"] for r in camp], name="campaign"),
                               columns=["units", "impressions", "clicks"], dtype="int64")
    wk = sorted(wk, key=lambda r: r["w"])
    by_week = pd.DataFrame([[int(r["units"]), int(r["impressions"]), int(r["clicks"])] for r in wk],
                           index=pd.Index([_label(int(r["w"]) * 7 - 3) for r in wk], name="week"),
                           columns=["units", "impressions", "clicks"], dtype="int64")
    first = min((r["first"] for r in wk), default=None)
    unseen_by = _count_by(unseen, "a")
    n_unseen = sum(unseen_by.values())
    n_seen_ids = sum(int(r["n"]) for r in pu)
    diagnostics = yield from _unseen_diagnostics(uns, v, ur[0], vr[0])
    return LeakageTables(
        rows=n_rows, by_arm=by_arm, holdout_by_campaign=by_campaign, holdout_by_week=by_week,
        holdout_first=day_of(int(first)).isoformat() if first is not None else None,
        pre_before_start=sum(int(r["bs"] or 0) for r in pu), pre_before_assignment=sum(int(r["ba"] or 0) for r in pu),
        pre_rows=pre_rows, unseen_ids=n_unseen, unseen_rows=unseen_rows,
        unseen_by_arm={a: unseen_by.get(i, 0) for i, a in enumerate(arms)}, exposed_ids=n_seen_ids + n_unseen,
        rows_read=fr.counts.get("exposure_rows", n_rows), duplicate_rows=fr.counts.get("exposure_duplicate_rows", 0),
        daily_rows={_label(int(r["d"])): int(r["count"]) for r in sorted(days, key=lambda r: r["d"])},
        **diagnostics)  # type: ignore[arg-type]


def _prefix(lo: str | None, hi: str | None, n: int) -> str:
    """The common prefix of a set of n strings from its extremes (as engine_pandas.common_prefix)."""
    if n < 2 or lo is None or hi is None:
        return ""
    k = 0
    while k < min(len(lo), len(hi), PREFIX_MAX) and lo[k] == hi[k]:
        k += 1
    return lo[:k]


def _extremes(uns: DataFrame, v: DataFrame) -> list[DataFrame]:
    """The unseen ids' count, hash-like count and extremes; the units' count and extremes."""
    return [uns.agg(F.count(F.lit(1)).alias("n"), F.sum(F.col("_unit").rlike(HASH_LIKE).cast("long")).alias("h"),
                    F.min("_unit").alias("lo"), F.max("_unit").alias("hi")),
            v.agg(F.count(F.lit(1)).alias("n"), F.min("_unit").alias("lo"), F.max("_unit").alias("hi"))]


def _unseen_diagnostics(uns: DataFrame, v: DataFrame, r: dict[str, Any],
                        vr: dict[str, Any]) -> Generator[list[DataFrame], list[Rows], dict[str, object]]:
    """Why exposed ids miss the visits (hashed ids, a prefix added or dropped): the pandas engine's rule.

    `r` and `vr` are `_extremes`' rows; a builder that needs a round only when a prefix is to be searched."""
    out: dict[str, object] = {"unseen_hash_like": 0, "unseen_prefix": "", "unseen_match_without_prefix": 0,
                              "visits_prefix": "", "unseen_match_with_visits_prefix": 0}
    n_unseen = int(r["n"])
    if not n_unseen:
        return out
    out["unseen_hash_like"] = int(r["h"] or 0)
    searches: list[tuple[str, str, str, list[str], Callable[[str], Column]]] = []
    pre = _prefix(r["lo"], r["hi"], n_unseen)
    if pre:
        searches.append(("unseen_prefix", "unseen_match_without_prefix", pre, _cuts(pre),
                         lambda p: F.expr(f"substring(_unit, {len(p) + 1})")))
    vpre = _prefix(vr["lo"], vr["hi"], int(vr["n"]))
    if vpre:
        searches.append(("visits_prefix", "unseen_match_with_visits_prefix", vpre, _cuts(vpre),
                         lambda p: F.concat(F.lit(p), F.col("_unit"))))
    if not searches:
        return out
    units = v.select("_unit")
    counts = yield [uns.select(make(p).alias("_unit")).join(units, "_unit", "left_semi").agg(
        F.count(F.lit(1)).alias("n")) for *_, cuts, make in searches for p in cuts]
    at = 0
    for key, match, prefix, cuts, _ in searches:  # the cut that matches most ids, the longest on a tie
        n, _, p = max((int(counts[at + i][0]["n"]), len(p), p) for i, p in enumerate(cuts))
        at += len(cuts)
        out[key], out[match] = (p, n) if n else (prefix, 0)
    return out


def churn_tables(spec: Spec, fr: SparkFrames, v: DataFrame) -> Generator[list[DataFrame], list[Rows], ChurnTables]:
    """Identity links against the units' arms: customers seen in several arms, by browser (a builder)."""
    assert fr.identities is not None
    cols = ["_unit", "_eff"] + (["_browser"] if fr.has_browser else [])
    kj = fr.identities.join(v.select(*cols), "_unit", "left")
    arm = F.coalesce(F.col("_eff"), hashed_index(spec))
    browser = (F.coalesce(F.col("_browser"), F.lit("(not in visits)")) if fr.has_browser
               else F.lit("(no browser column)"))
    kj = kj.select("_unit", "_customer", arm.alias("_a"), browser.alias("_b"), F.col("_eff").isNull().alias("_out"))
    kj = kj.cache()
    fr.cached.append(kj)
    per_c = kj.groupBy("_customer").agg(F.count(F.lit(1)).alias("n"), F.countDistinct("_a").alias("arms"))
    per_b = kj.groupBy("_b", "_customer").agg(F.count(F.lit(1)).alias("n"), F.countDistinct("_a").alias("arms"))
    hist, bh, ids = yield [
        per_c.groupBy("n").agg(F.count(F.lit(1)).alias("customers"),
                               F.sum((F.col("arms") > 1).cast("long")).alias("multi")),
        per_b.groupBy("_b", "n").agg(F.count(F.lit(1)).alias("customers"),
                                     F.sum((F.col("arms") > 1).cast("long")).alias("multi")),
        kj.agg(F.countDistinct(F.when(F.col("_out"), F.col("_unit"))).alias("out"),
               F.countDistinct("_unit").alias("ids"))]
    by_b: dict[str, list[int]] = {}
    for r in bh:
        acc = by_b.setdefault(r["_b"], [0, 0])
        acc[0] += int(r["customers"])
        acc[1] += int(r["multi"])
    by_browser = pd.DataFrame([by_b[b] for b in by_b], index=pd.Index(list(by_b), name="browser"),
                              columns=["customers", "multi_arm"], dtype="int64")
    browser_hist = pd.DataFrame({"browser": [r["_b"] for r in bh], "ids": [int(r["n"]) for r in bh],
                                 "customers": [int(r["customers"]) for r in bh]})
    browser_hist = browser_hist.astype({"ids": "int64", "customers": "int64"})
    return ChurnTables(
        links=sum(int(r["n"]) * int(r["customers"]) for r in hist), customers=sum(int(r["customers"]) for r in hist),
        multi_arm=sum(int(r["multi"] or 0) for r in hist),
        ids_hist={int(r["n"]): int(r["customers"]) for r in sorted(hist, key=lambda r: r["n"])},
        by_browser=by_browser, browser_hist=browser_hist,
        ids_not_in_visits=int(ids[0]["out"]), link_ids=int(ids[0]["ids"]))
