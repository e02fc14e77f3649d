"""The readout's Spark loading: `shared.load_readout`'s rules (orders, extra visits covariates) as Spark columns.

Same set-aside rows, counts, notes and errors (file or table, column, sample rows) as the pandas
reader; every row stays in Spark, only counts and a few sample positions reach the driver.
"""

from __future__ import annotations

from datetime import date

from pyspark.sql import Column, DataFrame, SparkSession
from pyspark.sql import functions as F

from armlock.assign import InputError, Spec
from armlock.shared.engine_spark import exact_sums
from armlock.shared.engine_spark_read import (
    POS,
    SparkSource,
    as_of_cut,
    ids_column,
    labels_column,
    need,
    numbers_column,
    open_source,
    positions,
    present_columns,
    times_column,
)

from armlock.shared.load_readout import REVENUE_MAX


def _set_aside(src: SparkSource, rows: DataFrame, flag: Column, n: int, col: str, why: str,
               notes: list[str], what: str = "an empty") -> int:
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) with {what} '{col}' ({src.rows(positions(rows, flag), n)}) "
                     f"were set aside: {why}")
    return n


def load_orders(spark: SparkSession, spec: Spec, ref: str, as_of: date, notes: list[str],
                counts: dict[str, float]) -> DataFrame:
    """Orders as _key, _t (us), _rev and, when mapped, _attr: `shared.load_readout.load_orders`' rules."""
    co = spec.readout.orders
    key = co.unit_id or co.customer
    which = "unit_id" if co.unit_id else "customer"
    src, raw = open_source(spark, ref, "orders")
    notes += src.notes
    need(src, raw, {which: key, "time": co.time, "revenue": co.revenue}, "[readout.orders]")
    present = present_columns(raw)
    optional = {name: col for name, col in (("order_id", co.order_id), ("attributed", co.attributed))
                if col and col in present}
    for name, col in (("order_id", co.order_id), ("attributed", co.attributed)):
        if col and name not in optional:
            notes.append(f"{src.path.name}: no '{col}' column ([readout.orders] {name}); "
                         + ("orders are not de-duplicated" if name == "order_id"
                            else "attributed revenue comes only from --attributed-revenue"))
    if raw.schema[co.revenue].dataType.simpleString() == "boolean":
        raise InputError(f"{src.path}: column '{co.revenue}' ([readout.orders] revenue) holds true/false values, "
                         "not amounts: map the order's revenue column")
    sel = [ids_column(src, raw, key, notes).alias("_key"), times_column(src, raw, co.time, notes).alias("_t"),
           numbers_column(src, raw, co.revenue).alias("_rev")]
    if "attributed" in optional:
        sel.append((labels_column(raw, optional["attributed"]) == F.lit(co.attributed_value)).alias("_attr"))
    if "order_id" in optional:
        sel.append(ids_column(src, raw, optional["order_id"], None).alias("_oid"))
    rows = raw.select(*sel, *POS)
    empty = F.col("_key") == ""
    no_time = F.col("_t").isNull() & ~empty
    no_rev = (F.col("_rev").isNull() | F.isnan("_rev")) & ~empty & ~no_time
    huge = (F.abs(F.col("_rev")) >= REVENUE_MAX) & (F.abs(F.col("_rev")) != float("inf"))
    n_huge = rows.where(huge).count()
    if n_huge:
        first = rows.where(huge).orderBy(*POS).select("_rev").first()[0]  # type: ignore[index]
        raise InputError(f"{src.path}: column '{co.revenue}' ([readout.orders] revenue) has {n_huge:,} value(s) "
                         f"of {REVENUE_MAX:.0e} or more ({src.rows(positions(rows, huge), n_huge)}; e.g. "
                         f"{first:.6g}): an order's revenue is an amount; map the right column or fix the export")
    inf_rev = (F.abs(F.col("_rev")) == float("inf")) & ~empty & ~no_time
    keep = ~(empty | no_time | no_rev | inf_rev)
    c0 = rows.agg(F.count(F.lit(1)).alias("n"), *[F.sum(f.cast("long")).alias(a) for a, f in
                                                   (("e", empty), ("t", no_time), ("r", no_rev), ("i", inf_rev))]
                  ).collect()[0]
    counts["order_rows"] = int(c0["n"])
    counts["order_empty_keys"] = _set_aside(src, rows, empty, int(c0["e"] or 0), key,
                                            "an order needs a key to find its unit", notes)
    counts["order_missing_time"] = _set_aside(src, rows, no_time, int(c0["t"] or 0), co.time, "an order needs a time",
                                              notes)
    counts["order_missing_revenue"] = _set_aside(src, rows, no_rev, int(c0["r"] or 0), co.revenue,
                                                 "an order needs revenue", notes)
    counts["order_infinite_revenue"] = _set_aside(src, rows, inf_rev, int(c0["i"] or 0), co.revenue,
                                                  "an order's revenue is an amount", notes, "an infinite")
    dup = F.lit(False)
    if "order_id" in optional:
        # `shared.load_readout._order_ids`: a sale repeats the first sale row of its id (over every row read);
        # a refund repeats only an earlier refund of the same id, time and amount; a refund whose id
        # is a usable sale's is dated at that sale
        is_ref = F.coalesce(F.col("_rev") < 0, F.lit(False))
        has = F.col("_oid") != ""
        rows = rows.withColumn("_ref", is_ref).withColumn("_ok", keep)
        sale_first = (rows.where(has & ~F.col("_ref")).groupBy("_oid")
                      .agg(F.min(F.struct(*POS)).alias("_first_sale")))
        ref_first = (rows.where(has & F.col("_ref")).groupBy("_oid", "_t", "_rev")
                     .agg(F.min(F.struct(*POS)).alias("_first_ref")))
        rows = rows.join(sale_first, "_oid", "left").join(ref_first, ["_oid", "_t", "_rev"], "left")
        sale_dup = has & ~F.col("_ref") & (F.struct(*POS) != F.col("_first_sale"))
        ref_dup = has & F.col("_ref") & (F.struct(*POS) != F.col("_first_ref"))
        rows = rows.withColumn("_dup", sale_dup | ref_dup)
        sale_t = (rows.where(has & ~F.col("_ref") & ~F.col("_dup") & F.col("_ok"))
                  .select(F.col("_oid"), F.col("_t").alias("_sale_t")))
        rows = rows.join(sale_t, "_oid", "left")
        moved = F.col("_ref") & has & F.col("_sale_t").isNotNull()
        m = rows.agg(F.sum((moved & ~F.col("_dup") & F.col("_ok")).cast("long")).alias("n"),
                     F.sum((moved & ~F.col("_dup") & F.col("_ok") & (F.col("_t") >= as_of_cut(as_of)))
                           .cast("long")).alias("late")).collect()[0]
        n_moved = int(m["n"] or 0)
        counts["refunds_dated_at_order"] = n_moved
        if n_moved:
            notes.append(f"{src.path.name}: {n_moved:,} refund row(s) reuse their order's id and were dated at "
                         f"their order ({int(m['late'] or 0):,} of them dated after the as-of {as_of}): a refund is "
                         "netted in the window of the order it refunds")
        rows = rows.withColumn("_t", F.when(moved, F.col("_sale_t")).otherwise(F.col("_t")))
        dup = F.col("_dup")
    late = keep & (F.col("_t") >= as_of_cut(as_of))
    n_late = int(rows.agg(F.sum(late.cast("long")).alias("l")).collect()[0]["l"] or 0)
    counts["orders_after_as_of"] = n_late
    if n_late:
        notes.append(f"{src.path.name}: {n_late:,} order(s) after the as-of date {as_of} are ignored")
    keep = keep & ~late
    if "order_id" in optional:
        dup = dup & keep
        n_dup = int(rows.where(dup).count())
        counts["duplicate_orders"] = n_dup
        if n_dup:
            notes.append(f"{src.path.name}: {n_dup:,} row(s) repeat an order id already seen "
                         f"({src.rows(positions(rows, dup), n_dup)}); each order id was counted once (a refund "
                         "repeats only with the same id, time and amount)")
        keep = keep & ~dup
    cols = ["_key", "_t", "_rev"] + (["_attr"] if "attributed" in optional else [])
    kept = rows.where(keep).select(*cols).cache()
    r = kept.agg(F.sum((F.col("_rev") < 0).cast("long")).alias("n")).collect()[0]
    n_ref = int(r["n"] or 0)
    counts["refund_rows"] = n_ref
    counts["refund_total"] = float(exact_sums(kept.where(F.col("_rev") < 0), [], "_rev").get((), 0))
    if n_ref:
        notes.append(f"{src.path.name}: {n_ref:,} refund row(s) (negative revenue, "
                     f"{-counts['refund_total']:,.2f} in total) were kept: revenue is net of refunds")
    return kept


def extra_covariates(spark: SparkSession, spec: Spec, ref: str, missing: list[str]) -> DataFrame:
    """_unit and _m<i> for the [readout] covariates the audit did not read, from each unit's earliest
    visits row (ties by position in the input), as `shared.load_readout.attach_covariates`."""
    cv = spec.audit.visits
    src, raw = open_source(spark, ref, "visits", cv.delimiter)
    wanted = {"unit_id": cv.unit_id, "first_seen": cv.first_seen}
    wanted.update({f"covariates[{i}]": c for i, c in enumerate(missing)})
    need(src, raw, wanted, "[readout]")
    rows = raw.select(ids_column(src, raw, cv.unit_id, None).alias("_unit"),
                      times_column(src, raw, cv.first_seen, [], cv.first_seen_format).alias("_t"),
                      *[numbers_column(src, raw, c).alias(f"_m{i}") for i, c in enumerate(missing)], *POS)
    names = [f"_m{i}" for i in range(len(missing))]
    first = F.min(F.struct("_t", *POS, *names)).alias("r")
    return (rows.where((F.col("_unit") != "") & F.col("_t").isNotNull()).groupBy("_unit").agg(first)
            .select("_unit", *[F.col("r." + x).alias(x) for x in names]))
