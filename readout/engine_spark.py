"""The readout's Spark engine: `readout.engine_pandas`'s rules as Spark columns; only moment tables come back.

Orders are joined to their units (by unit id, or by customer through the identity links, the
customer's first unit), the outcome window and the pooled revenue cap applied, and each unit's
revenue summed in the pandas engine's fixed order (time, then revenue), all in Spark. The
moments of each arm and look are exact sums (`audit.engine_spark.exact_sums`) turned into the
same values as the pandas engine's by `readout.rules`. The driver receives sums whose number
depends on arms, variables and looks, never on units or orders; plus, when a revenue cap is
set, the distinct unit revenues near the cap's quantile (to pick its order statistics exactly).
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date, timedelta

import pandas as pd
from pyspark.sql import Column, DataFrame, SparkSession
from pyspark.sql import functions as F

from armlock.assign import InputError, Spec
from armlock.shared.engine import Inputs, file_bytes
from armlock.shared.engine_spark import exact_sums, hashed_index
from armlock.shared.engine_spark_load import SparkFrames
from armlock.shared.engine_spark_read import POS, as_of_cut

from .engine_spark_load import extra_covariates, load_orders
from .rules import fill_value, final_names, linear_quantile, look_dates, look_names, means_of, moments_of, pairs
from armlock.shared.readout_tables import Moments, ReadoutTables

US_DAY = 86_400 * 10**6


def readout_tables(spark: SparkSession, spec: Spec, inputs: Inputs, fr: SparkFrames, as_of: date,
                   advance: Callable[[int], None]) -> tuple[ReadoutTables, list[str]]:
    """The readout's tables from the audit's loaded frames and the orders; with the readout's notes."""
    assert fr.visits is not None and inputs.orders is not None
    cfg = spec.readout
    notes: list[str] = []
    counts: dict[str, float] = {}
    orders = load_orders(spark, spec, str(inputs.orders), as_of, notes, counts)
    fr.cached.append(orders)
    advance(file_bytes(inputs.orders))
    day_no = F.expr(f"CASE WHEN _t >= 0 THEN _t div {US_DAY} ELSE -((-_t - 1) div {US_DAY}) - 1 END")  # floor
    day_rows = orders.groupBy(day_no.alias("d")).count().collect()
    orders_daily = {(date(1970, 1, 1) + timedelta(days=int(r["d"]))).isoformat(): int(r["count"])
                    for r in sorted(day_rows, key=lambda r: r["d"])}
    arms, k = list(spec.arm_names), len(spec.arms)
    covs = list(cfg.covariates)
    cut = as_of_cut(as_of)
    start_us = int(pd.Timestamp(spec.start).value // 1000)

    # units: the hashed arm (intent to treat), first-seen time and position, covariates, exposed flag
    units = fr.visits.select("_unit", "_t", *POS, hashed_index(spec).alias("_a"),
                             *[F.col(fr.numbers[c]).alias(f"_c{i}") for i, c in enumerate(covs) if c in fr.numbers])
    missing = [c for c in covs if c not in fr.numbers]
    if missing:
        extra = extra_covariates(spark, spec, str(inputs.visits), missing)
        units = units.join(extra, "_unit", "left").select(
            *units.columns, *[F.col(f"_m{missing.index(c)}").alias(f"_c{i}") for i, c in enumerate(covs)
                              if c in missing])
    if fr.exposures is not None:
        seen = units.select("_unit", F.col("_t").alias("_fs"))
        hit = (fr.exposures.join(seen, "_unit").where((F.col("_t") >= start_us) & (F.col("_t") >= F.col("_fs")))
               .select("_unit").distinct().withColumn("_exp", F.lit(1.0)))
        units = units.join(hit, "_unit", "left")
    units = units.withColumn("_exp", F.coalesce(F.col("_exp"), F.lit(0.0)) if fr.exposures is not None
                             else F.lit(0.0))
    units = _fill_covariates(units, covs, notes).cache()
    fr.cached.append(units)

    # orders -> units
    if cfg.orders.customer:
        if fr.identities is None:
            raise InputError("orders are keyed by customer ([readout.orders] customer = "
                             f"\"{cfg.orders.customer}\") but no identity links were given: "
                             "pass --identities to join customers to visitors")
        owner = _first_units(fr.identities, units, counts)
        if counts["customers_multi_arm"]:
            notes.append(f"{int(counts['customers_multi_arm']):,} customer(s) have visitor ids in more than one arm; "
                         "each counts in the arm of their first visitor id (intent to treat)")
        orders = orders.join(owner, "_key", "left")
    else:
        orders = orders.join(units.select(F.col("_unit").alias("_key")).withColumn("_unit", F.col("_key")),
                             "_key", "left")
    o = orders.join(units.select("_unit", F.col("_t").alias("_fs")), "_unit", "left")
    matched = F.col("_unit").isNotNull()
    before = matched & (F.col("_t") < F.col("_fs"))
    window_us = None if cfg.window == "to_as_of" else int(cfg.window) * US_DAY
    after = (matched & ~before & (F.col("_t") >= F.col("_fs") + window_us)) if window_us is not None else F.lit(False)
    c = o.agg(F.sum((~matched).cast("long")).alias("u"), F.sum(before.cast("long")).alias("b"),
              F.sum(after.cast("long")).alias("w")).collect()[0]
    n_unmatched = int(c["u"] or 0)
    counts["orders_unmatched"] = n_unmatched
    if n_unmatched:
        what = "customer key has no visitor id in the visits" if cfg.orders.customer else \
            "unit id is not in the visits"
        lost = float(exact_sums(o.where(~matched), [], "_rev").get((), 0))
        notes.append(f"orders: {n_unmatched:,} order row(s) ({lost:,.2f} revenue) whose "
                     f"{what} were left out: they cannot be given an arm")
    n_before = int(c["b"] or 0)
    counts["orders_before_first_seen"] = n_before
    if n_before:
        notes.append(f"orders: {n_before:,} order row(s) placed before their unit was first seen were "
                     "left out: the test cannot have caused them")
    included: Column = F.lit(True)
    if window_us is not None:
        counts["orders_after_window"] = int(c["w"] or 0)
        included = F.col("_t") + window_us <= cut
        inc = units.agg(F.sum(included.cast("long")).alias("i"), F.count(F.lit(1)).alias("n")).collect()[0]
        n_out = int(inc["n"]) - int(inc["i"] or 0)
        counts["units_window_incomplete"] = n_out
        if n_out:
            notes.append(f"{n_out:,} unit(s) first seen less than {cfg.window} days before the end of "
                         f"{as_of} were left out: their outcome window has not ended")
        if not int(inc["i"] or 0):
            raise InputError(f"no unit has a complete {cfg.window}-day outcome window by {as_of}: "
                             "choose a later --as-of or a shorter [readout] window")
    valid = o.where(matched & ~before & ~after)

    # each unit's orders in one fixed order (time, then revenue), summed up to each look's end
    days = look_dates(spec, as_of)
    limits = [as_of_cut(d) for d in days]
    per_unit = valid.groupBy("_unit").agg(F.array_sort(F.collect_list(F.struct("_t", "_rev"))).alias("_os"))
    none = F.array().cast(per_unit.schema["_os"].dataType)  # a unit without orders: an empty list
    u = units.join(per_unit, "_unit", "left").withColumn("_os", F.coalesce("_os", none))
    u = u.select("*", _revenue_upto(None).alias("_r"),
                 F.size(F.filter("_os", lambda x: x["_rev"] >= 0)).cast("double").alias("_o"),
                 *[_revenue_upto(lim).alias(f"_r{j}") for j, lim in enumerate(limits) if lim < cut],
                 included.alias("_inc")).drop("_os").cache()
    fr.cached.append(u)

    cap = None
    if cfg.revenue_cap:
        pool = u.where("_inc").select("_r")
        n_inc = int(pool.count())
        picked = _order_stats(pool, "_r", n_inc, cfg.revenue_cap)
        cap = linear_quantile(n_inc, cfg.revenue_cap, lambda i: picked[i])
        capped = int(pool.where(F.col("_r") > cap).count())
        counts["units_capped"] = capped
        counts["revenue_cap_value"] = cap
        notes.append(f"revenue cap: unit revenue above the pooled {cfg.revenue_cap:g} quantile, {cap:,.2f}, was "
                     f"capped for {capped:,} unit(s) (the quantile is computed over all arms together)")
    attributed = None
    if "_attr" in valid.columns:
        credited = valid.where("_attr").join(u.where("_inc").select("_unit"), "_unit", "left_semi")
        attributed = float(exact_sums(credited, [], "_rev").get((), 0))

    def capped_(col: str) -> Column:
        return F.least(F.col(col), F.lit(cap)) if cap is not None else F.col(col)

    cov_cols = [F.col(f"_c{i}") for i in range(len(covs))]
    groups: list[tuple[tuple[str, ...], Column, list[Column]]] = [
        (final_names(covs), F.col("_inc"),
         [capped_("_r"), F.col("_o"), (F.col("_o") > 0).cast("double"), F.col("_exp"), *cov_cols])]
    look_of: list[str] = []
    for j, (d, lim) in enumerate(zip(days, limits)):
        keep = F.col("_t") < lim
        if window_us is not None:
            keep = keep & (F.col("_t") + window_us <= lim)
        groups.append((look_names(covs), keep, [capped_(f"_r{j}" if lim < cut else "_r"), *cov_cols]))
        look_of.append(d.isoformat())
    tables = _moments(u, groups, k)
    looks = [(day, dict(zip(arms, ms))) for day, ms in zip(look_of, tables[1:]) if sum(m.n for m in ms)]
    return (ReadoutTables(arms=arms, covariates=covs, final=dict(zip(arms, tables[0])), looks=looks,
                          attributed=attributed, counts=counts, orders_daily=orders_daily), notes)


def _revenue_upto(limit: int | None) -> Column:
    """A unit's revenue from its sorted orders (before `limit`), added left to right from 0.0."""
    arr = F.col("_os") if limit is None else F.filter("_os", lambda x: x["_t"] < limit)
    return F.aggregate(arr, F.lit(0.0), lambda acc, x: acc + x["_rev"])


def _fill_covariates(units: DataFrame, covs: list[str], notes: list[str]) -> DataFrame:
    """An empty covariate cell gets the pooled mean over every unit (noted), as the pandas engine."""
    if not covs:
        return units
    aggs = []
    for i in range(len(covs)):
        x = F.col(f"_c{i}")
        aggs += [F.sum((x.isNull() | F.isnan(x)).cast("long")).alias(f"nan{i}"),
                 F.sum((x == float("inf")).cast("long")).alias(f"pi{i}"),
                 F.sum((x == float("-inf")).cast("long")).alias(f"ni{i}"),
                 F.sum((x.isNotNull() & ~F.isnan(x) & (F.abs(x) != float("inf"))).cast("long")).alias(f"f{i}")]
    c = units.agg(*aggs).collect()[0]
    long = units.select(F.explode(F.array(*[F.struct(F.lit(i).alias("ci"), F.col(f"_c{i}").alias("x"))
                                            for i in range(len(covs))])).alias("p")).select("p.ci", "p.x")
    sums = exact_sums(long, ["ci"], "x")
    out = []
    for i, name in enumerate(covs):
        x = F.col(f"_c{i}")
        n_nan = int(c[f"nan{i}"] or 0)
        if n_nan:
            fill = fill_value(sums.get((i,), 0), int(c[f"f{i}"] or 0), int(c[f"pi{i}"] or 0), int(c[f"ni{i}"] or 0))
            notes.append(f"covariate '{name}': {n_nan:,} unit(s) with no value were given the pooled "
                         f"mean {fill:,.4g} (arm-blind, so the comparison stays fair)")
            x = F.when(x.isNull() | F.isnan(x), F.lit(fill)).otherwise(x)
        out.append(x.alias(f"_c{i}"))
    return units.select(*[c for c in units.columns if not c.startswith("_c")], *out)


def _first_units(links: DataFrame, units: DataFrame, counts: dict[str, float]) -> DataFrame:
    """_key (customer) -> _unit: each customer's first unit in the visits (earliest first-seen, then
    position in the input), and the counts of linked and multi-arm customers."""
    j = links.join(units.select("_unit", "_t", *POS, "_a"), "_unit")
    per = j.groupBy("_customer").agg(F.min(F.struct("_t", *POS, "_unit")).alias("f"),
                                     F.countDistinct("_a").alias("na")).cache()
    c = per.agg(F.count(F.lit(1)).alias("n"), F.sum((F.col("na") > 1).cast("long")).alias("m")).collect()[0]
    counts["customers_linked"] = int(c["n"])
    counts["customers_multi_arm"] = int(c["m"] or 0)
    return per.select(F.col("_customer").alias("_key"), F.col("f._unit").alias("_unit"))


def _order_stats(pool: DataFrame, col: str, n: int, q: float) -> dict[int, float]:
    """The order statistics numpy's linear quantile reads (0-based ranks), exactly: an approximate
    quantile brackets them, and the distinct values inside the bracket are counted exactly."""
    vi = (n - 1) * q
    lo = min(int(vi), n - 1)
    ranks = {lo, min(lo + 1, n - 1)}
    band = 0.002
    while True:
        qs = [max(0.0, lo / n - band), min(1.0, (lo + 2) / n + band)]
        a, b = pool.agg(F.percentile_approx(col, qs, 10_000)).collect()[0][0]
        if qs[0] == 0.0:
            a = float("-inf")
        if qs[1] == 1.0:
            b = float("inf")
        x = F.col(col)
        below = int(pool.where(x < a).count())
        hist = pool.where((x >= a) & (x <= b)).groupBy(col).count().orderBy(col).collect()
        out, seen = {}, below
        for r in hist:
            for rank in ranks:
                if seen <= rank < seen + int(r["count"]):
                    out[rank] = float(r[col])
            seen += int(r["count"])
        if len(out) == len(ranks):
            return out
        band *= 8  # the approximation missed (it should not): widen the bracket


def _moments(u: DataFrame, groups: list[tuple[tuple[str, ...], Column, list[Column]]], k: int) -> list[list[Moments]]:
    """Each group's (final, looks) moments per arm: n and exact sums, then exact sums of centred products."""
    counts = u.groupBy("_a").agg(*[F.sum(keep.cast("long")).alias(f"n{g}") for g, (_, keep, _) in enumerate(groups)]
                                 ).collect()
    n = {(g, int(r["_a"])): int(r[f"n{g}"] or 0) for r in counts for g in range(len(groups))}

    def long(make: Callable[[int, list[Column]], list[Column]]) -> DataFrame:
        """(g, _a, v, x) rows: every group's values of each unit it keeps, in one pass over the units."""
        cells = [F.when(keep, F.array(*[F.struct(F.lit(g).alias("g"), F.lit(i).alias("v"), c.cast("double").alias("x"))
                                        for i, c in enumerate(make(g, cols))]))
                 for g, (_, keep, cols) in enumerate(groups)]
        every = F.flatten(F.filter(F.array(*cells), lambda a: a.isNotNull()))
        return u.select("_a", F.explode(every).alias("p")).select("p.g", "_a", "p.v", "p.x")

    sums = exact_sums(long(lambda g, cols: cols), ["g", "_a", "v"], "x")
    means = {(g, a): means_of(n.get((g, a), 0), [sums.get((g, a, i), 0) for i in range(len(groups[g][0]))])
             for g in range(len(groups)) for a in range(k)}

    def centred(g: int, cols: list[Column]) -> list[Column]:
        d = [c.cast("double") - F.element_at(F.array(*[F.lit(float(means[(g, a)][i])) for a in range(k)]),
                                             F.col("_a") + 1) for i, c in enumerate(cols)]
        return [d[a] * d[b] for a, b in pairs(len(cols))]

    cross = exact_sums(long(centred), ["g", "_a", "v"], "x")
    out = []
    for g, (names, _, _) in enumerate(groups):
        p = len(pairs(len(names)))
        out.append([moments_of(names, n.get((g, a), 0), means[(g, a)], [cross.get((g, a, i), 0) for i in range(p)])
                    for a in range(k)])
    return out
