"""The Spark engine's loading: `audit.load`'s rules (set-aside rows, first-seen de-duplication, as-of) in Spark."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, timedelta

from pyspark.sql import DataFrame, SparkSession
from pyspark.sql import functions as F

from armlock.assign import InputError, Spec

from .engine_spark_batch import collect_together
from .engine_spark_read import (
    POS,
    as_of_cut,
    ids_column,
    labels_column,
    need,
    note_empty,
    numbers_column,
    open_source,
    present_columns,
    times_column,
)
from .load import settle_as_of

EPOCH = date(1970, 1, 1)
US_DAY = 86_400 * 10**6


def day_of(us: int) -> date:
    return EPOCH + timedelta(days=us // US_DAY)


@dataclass
class SparkFrames:
    """What the Spark engine counts from: unit-level visits (cached), exposures and links, notes, counts."""

    visits: DataFrame | None = None  # _unit, _t (us), POS of the kept row, _arm, [_fp], [_browser], _l<i>, _x<i>
    labels: dict[str, str] = field(default_factory=dict)  # user column -> internal label column
    numbers: dict[str, str] = field(default_factory=dict)  # covariate -> internal number column
    levels: dict[str, list[str]] = field(default_factory=dict)  # label column -> levels over every row read
    has_fp: bool = False
    has_browser: bool = False
    exposures: DataFrame | None = None  # _unit, _t, _camp, _kind (0 impression, 1 click, 2 other)
    identities: DataFrame | None = None  # _unit, _customer (distinct)
    notes: list[str] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    cached: list[DataFrame] = field(default_factory=list)
    data_through: date | None = None  # the last day the visits have data for, up to the as-of date
    arm_pairs: dict[tuple[int, int], int] = field(default_factory=dict)  # (recorded, recomputed) -> units


def load_visits(spark: SparkSession, spec: Spec, ref: str, as_of: date | None, fr: SparkFrames) -> date:
    """Fill `fr.visits`: one row per unit (its earliest first-seen row), cut at as-of; returns the as-of date."""
    cfg, cv = spec.audit, spec.audit.visits
    src, raw = open_source(spark, ref, "visits", cv.delimiter)
    fr.notes += src.notes
    present = present_columns(raw)
    wanted = {"unit_id": cv.unit_id, "first_seen": cv.first_seen, "arm": cv.arm}
    for key in ("segments", "covariates", "categorical_covariates"):  # every missing column named at once
        wanted.update({f"[audit] {key}[{i}]": c for i, c in enumerate(getattr(cfg, key))})
    need(src, raw, wanted, "[audit.visits]")
    optional: dict[str, str] = {}
    for key, name in (("fingerprint", cv.fingerprint), ("browser", cv.browser)):
        if name and name in present:
            optional[key] = name
        elif name:
            fr.notes.append(f"{src.path.name}: no '{name}' column ([audit.visits] {key}); "
                            + ("the spec fingerprint in the data is not checked" if key == "fingerprint"
                               else "identity churn is not split by browser"))
    sel = [ids_column(src, raw, cv.unit_id, fr.notes).alias("_unit"),
           times_column(src, raw, cv.first_seen, fr.notes, cv.first_seen_format,
                        "[audit.visits] first_seen_format").alias("_t"),
           labels_column(raw, cv.arm).alias("_arm")]
    if "fingerprint" in optional:
        sel.append(labels_column(raw, optional["fingerprint"]).alias("_fp"))
    if "browser" in optional:
        sel.append(labels_column(raw, optional["browser"]).alias("_browser"))
    fr.has_fp, fr.has_browser = "fingerprint" in optional, "browser" in optional
    for i, name in enumerate(dict.fromkeys([*cfg.segments, *cfg.categorical_covariates])):
        fr.labels[name] = f"_l{i}"
        sel.append(labels_column(raw, name).alias(f"_l{i}"))
    for i, name in enumerate(cfg.covariates):
        fr.numbers[name] = f"_x{i}"
        sel.append(numbers_column(src, raw, name).alias(f"_x{i}"))
    rows = raw.select(*sel, *POS)
    empty, no_time = F.col("_unit") == "", F.col("_t").isNull() & (F.col("_unit") != "")
    keep = rows.where(~empty & F.col("_t").isNotNull())
    others = [x for x in rows.columns if x not in ("_unit", "_t", *POS)]
    # the earliest row of each unit; ties by position in the input (the pandas engine's stable sort)
    first = F.min(F.struct("_t", *POS, *others)).alias("r")
    units = (keep.groupBy("_unit").agg(first, F.count(F.lit(1)).alias("_rows"))
             .select("_unit", *[F.col("r." + x).alias(x) for x in ("_t", *POS, *others)], "_rows"))
    units = units.cache()
    fr.cached.append(units)
    # one job: the rows read (levels over every row, as the pandas reader's categories: a level seen only
    # in set-aside rows stays) and the units by recorded arm and first-seen day (the as-of cut is a day's end)
    day = ((F.col("_t") - F.pmod(F.col("_t"), F.lit(US_DAY))) / F.lit(US_DAY)).cast("long")
    read, by_day = collect_together([
        rows.agg(F.count(F.lit(1)).alias("n"), F.sum(empty.cast("long")).alias("e"),
                 F.sum(no_time.cast("long")).alias("t"), *[F.collect_set(x).alias(x) for x in fr.labels.values()]),
        units.groupBy("_arm", day.alias("_d")).agg(F.count(F.lit(1)).alias("u"), F.sum(F.col("_rows") - 1).alias("dup"),
                                                   F.sum((F.col("_rows") > 1).cast("long")).alias("dup_units"))])
    c = read[0]
    fr.levels = {x: list(c[x]) for x in fr.labels.values()}
    total = int(c["n"])
    fr.counts["visit_rows"] = total
    fr.counts["empty_ids"] = note_empty(src, rows, empty, int(c["e"] or 0), cv.unit_id, "they have no arm", fr.notes)
    fr.counts["missing_first_seen"] = note_empty(src, rows, no_time, int(c["t"] or 0), cv.first_seen,
                                                 "a unit needs a first-seen time", fr.notes)
    n_dup = sum(int(r["dup"]) for r in by_day)
    fr.counts["duplicate_rows"] = n_dup
    if n_dup:
        fr.notes.append(f"{src.path.name}: {sum(int(r['dup_units']) for r in by_day):,} unit id(s) had several "
                        f"first-seen rows ({n_dup:,} extra row(s)); the earliest row of each was kept")
    if not by_day:
        why = "it has no data rows" if not total else "every row lacked an id or a time"
        raise InputError(f"{src.path}: no usable rows in the visits file ({why})")
    last = day_of(max(int(r["_d"]) for r in by_day) * US_DAY)
    as_of = settle_as_of(fr, as_of, last)
    cut = as_of_cut(as_of)
    last_day = (cut - US_DAY) // US_DAY  # the as-of day, in days since the epoch
    per_arm = [{"_arm": a, "count": sum(int(r["u"]) for r in by_day if r["_arm"] == a and r["_d"] <= last_day),
                "late": sum(int(r["u"]) for r in by_day if r["_arm"] == a and r["_d"] > last_day)}
               for a in dict.fromkeys(r["_arm"] for r in by_day)]
    late = sum(r["late"] for r in per_arm)
    fr.counts["visits_after_as_of"] = late
    if late:
        fr.notes.append(f"{src.path.name}: {late:,} unit(s) first seen after the as-of date {as_of} are ignored")
    visits = units.where(F.col("_t") < cut).drop("_rows")
    arms = [r for r in per_arm if r["count"] > 0]
    if not arms:
        raise InputError(f"{src.path}: no units first seen on or before the as-of date {as_of}")
    seen = [r["_arm"] for r in sorted(arms, key=lambda r: (-r["count"], r["_arm"]))]
    if not set(spec.arm_names) & set(seen):
        raise InputError(
            f"{src.path}: none of the arms recorded in column '{cv.arm}' is an arm of the spec "
            f"(found: {', '.join(seen[:10])}; the spec's arms: {', '.join(spec.arm_names)}); "
            "map the right column in [audit.visits] arm, or check that this is the right test")
    fr.visits = visits
    return as_of


def load_exposures(spark: SparkSession, spec: Spec, ref: str, as_of: date, fr: SparkFrames) -> None:
    """Fill `fr.exposures`: unit, time, campaign and kind code, rows set aside as `audit.load` does."""
    ce = spec.audit.exposures
    src, raw = open_source(spark, ref, "exposures", ce.delimiter)
    fr.notes += src.notes
    need(src, raw, {"unit_id": ce.unit_id, "time": ce.time, "campaign": ce.campaign, "kind": ce.kind},
         "[audit.exposures]")
    rows = raw.select(ids_column(src, raw, ce.unit_id, fr.notes).alias("_unit"),
                      times_column(src, raw, ce.time, fr.notes, ce.time_format, "[audit.exposures] time_format").alias("_t"),
                      labels_column(raw, ce.campaign).alias("_camp"),
                      labels_column(raw, ce.kind).alias("_kl"), *POS)
    imp, clk = set(ce.impression_values), set(ce.click_values)
    kind = (F.when(F.col("_kl").isin(list(imp)), 0).when(F.col("_kl").isin(list(clk)), 1).otherwise(2)
            if imp or clk else F.lit(2))
    rows = rows.withColumn("_kind", kind.cast("int"))
    empty = F.col("_unit") == ""
    no_time = F.col("_t").isNull() & ~empty
    late = F.col("_t").isNotNull() & (F.col("_t") >= as_of_cut(as_of)) & ~empty
    kept = rows.where(~(empty | no_time | late))
    # exact duplicates (same id, time, campaign and raw kind): one event logged twice, counted once
    events = kept.groupBy("_unit", "_t", "_camp", "_kl").agg(F.first("_kind").alias("_kind"),
                                                              F.count(F.lit(1)).alias("_n")).cache()
    fr.cached.append(events)
    read, dups = collect_together([
        rows.agg(F.count(F.lit(1)).alias("n"), F.sum((F.col("_kind") == 2).cast("long")).alias("o"),
                 F.sum(empty.cast("long")).alias("e"), F.sum(no_time.cast("long")).alias("t"),
                 F.sum(late.cast("long")).alias("l")),
        events.agg(F.sum(F.col("_n") - 1).alias("dup"))])
    c = read[0]
    fr.counts["exposure_rows"] = int(c["n"])
    n_other = int(c["o"] or 0)
    if n_other:  # the other kinds in order of first appearance, as the pandas reader lists its levels
        firsts = rows.where(F.col("_kind") == 2).groupBy("_kl").agg(F.min(F.struct(*POS)).alias("p"))
        others = [r["_kl"] for r in firsts.orderBy("p").limit(5).collect()]
        fr.notes.append(f"{src.path.name}: {n_other:,} row(s) have a '{ce.kind}' that is neither an "
                        f"impression nor a click ({', '.join(others[:5])}); counted as exposures of "
                        "kind 'other' (map them in [audit.exposures] impression_values / click_values)")
    fr.counts["exposure_empty_ids"] = note_empty(src, rows, empty, int(c["e"] or 0), ce.unit_id,
                                                 "they name no unit", fr.notes)
    fr.counts["exposure_missing_time"] = note_empty(src, rows, no_time, int(c["t"] or 0), ce.time,
                                                    "an exposure needs a time", fr.notes)
    n_late = int(c["l"] or 0)
    fr.counts["exposures_after_as_of"] = n_late
    if n_late:
        fr.notes.append(f"{src.path.name}: {n_late:,} exposure row(s) after the as-of date {as_of} are ignored")
    n_dup = int(dups[0]["dup"] or 0)
    fr.counts["exposure_duplicate_rows"] = n_dup
    if n_dup:
        fr.notes.append(f"{src.path.name}: {n_dup:,} exposure row(s) repeat another row exactly (same id, "
                        "time, campaign and kind) and were counted once; if the vendor logs whole seconds, two real "
                        "impressions in one second look alike")
    fr.exposures = events.select("_unit", "_t", "_camp", "_kind")


def load_identities(spark: SparkSession, spec: Spec, ref: str, as_of: date, fr: SparkFrames) -> None:
    """Fill `fr.identities`: distinct (unit, customer) links known by the end of the as-of day."""
    assert fr.visits is not None
    ci = spec.audit.identities
    src, raw = open_source(spark, ref, "identities", ci.delimiter)
    fr.notes += src.notes
    need(src, raw, {"unit_id": ci.unit_id, "customer": ci.customer}, "[audit.identities]")
    has_time = bool(ci.time) and ci.time in present_columns(raw)
    sel = [ids_column(src, raw, ci.unit_id, fr.notes).alias("_unit"),
           ids_column(src, raw, ci.customer, None).alias("_customer")]
    if has_time:
        sel.append(times_column(src, raw, ci.time, fr.notes, ci.time_format, "[audit.identities] time_format").alias("_t"))
    rows = raw.select(*sel, *POS)
    empty, no_cust = F.col("_unit") == "", F.col("_customer") == ""
    usable = ~(empty | no_cust)
    no_time = (F.col("_t").isNull() & usable) if has_time else F.lit(False)
    late = (F.col("_t") >= as_of_cut(as_of)) & usable & ~no_time if has_time else F.lit(False)
    if has_time:
        kept = rows.where(usable & ~no_time & ~late).select("_unit", "_customer")
        unseen_q = []
    else:  # only links of units first seen by the as-of date (those in the cut visits)
        known = fr.visits.select("_unit", F.lit(True).alias("_known"))
        marked = rows.where(usable).select("_unit", "_customer").join(known, "_unit", "left")
        kept = marked.where(F.col("_known").isNotNull()).select("_unit", "_customer")
        unseen_q = [marked.where(F.col("_known").isNull()).agg(F.count(F.lit(1)).alias("n"))]
    links = kept.distinct().cache()
    fr.cached.append(links)
    read, sizes, *unseen = collect_together([
        rows.agg(F.count(F.lit(1)).alias("n"), F.sum(empty.cast("long")).alias("e"),
                 F.sum((no_cust & ~empty).cast("long")).alias("c"), F.sum(no_time.cast("long")).alias("t"),
                 F.sum(late.cast("long")).alias("l")),
        links.agg(F.count(F.lit(1)).alias("links")), *unseen_q])
    c = read[0]
    fr.counts["identity_rows"] = int(c["n"])
    fr.counts["identity_empty_ids"] = note_empty(src, rows, empty, int(c["e"] or 0), ci.unit_id,
                                                 "they name no unit", fr.notes)
    fr.counts["identity_empty_customers"] = note_empty(src, rows, no_cust & ~empty, int(c["c"] or 0),
                                                       ci.customer, "they name no customer", fr.notes)
    if has_time:
        fr.counts["identity_missing_time"] = note_empty(
            src, rows, no_time, int(c["t"] or 0), ci.time,
            f"a link needs a time to be placed before or after {as_of}", fr.notes)
        n_late = int(c["l"] or 0)
        fr.counts["identity_links_after_as_of"] = n_late
        if n_late:
            fr.notes.append(f"{src.path.name}: {n_late:,} identity link(s) made after the as-of date "
                            f"{as_of} are ignored")
        before = int(c["n"]) - int(c["e"] or 0) - int(c["c"] or 0) - int(c["t"] or 0) - n_late
    else:
        unknown = int(unseen[0][0]["n"])
        fr.counts["identity_links_unseen_units"] = unknown
        what = f"no '{ci.time}' column" if ci.time else "no link-time column"
        fr.notes.append(f"{src.path.name}: {what} ([audit.identities] time), so churn as of {as_of} uses only links "
                        f"of units first seen by then" + (f"; {unknown:,} link(s) of other units were "
                                                          "set aside" if unknown else ""))
        before = int(c["n"]) - int(c["e"] or 0) - int(c["c"] or 0) - unknown
    after = int(sizes[0]["links"])
    if after < before:
        fr.notes.append(f"{src.path.name}: {before - after:,} repeated (unit, customer) row(s) counted once")
    fr.identities = links
