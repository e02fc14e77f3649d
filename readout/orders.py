"""The orders feed as the readout's gate reads it: rows used, match rate to the visits, coverage per arm, freshness.

A readout is only as good as its orders export: orders keyed by another id space match no visit,
an export of one arm only fakes a huge effect, a header-only file or one whose rows are all set
aside reads as "no effect". This check fails on each, so the readout is never called trustworthy
on them (thresholds our choice, documented in docs/feed-health.md):

- no order rows in the file, or none left after the set-aside rules: FAIL;
- share of the used order rows whose key matches no visit (`unmatched`) above `UNMATCHED_FAIL`:
  FAIL, above `UNMATCHED_WARN`: WARN (orders by people never tagged, app orders, an id mismatch);
- an arm with under `COVERAGE_FAIL` of the orders per unit the pooled arms have, beyond chance
  (one-sided binomial p below `COVERAGE_P` for so few of the matched orders falling in that arm
  when each arm gets its share of units): FAIL. No advertising effect moves orders per unit by a
  factor of three; an export filtered to one arm does;
- revenue so large that its sums overflow a float: FAIL;
- the orders feed ending before the as-of date, or outage days (`audit.feeds.feed_health`).
"""

from __future__ import annotations

from datetime import date

# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.assign import Spec
from armlock.audit import feed_health, feed_sentence
from armlock.shared.report import Check, Figure, Status, Table, worst

from armlock.shared.readout_tables import ReadoutTables

UNMATCHED_WARN = 0.2
UNMATCHED_FAIL = 0.5
COVERAGE_FAIL = 1 / 3
COVERAGE_P = 1e-6
TITLE = "Orders feed (rows used, match to visits, coverage per arm)"
SET_ASIDE = (("order_empty_keys", "an empty key"), ("order_missing_time", "no time"),
             ("order_missing_revenue", "no revenue"), ("order_infinite_revenue", "infinite revenue"),
             ("orders_after_as_of", "after the as-of date"), ("duplicate_orders", "a repeated order id"))


def check_orders(spec: Spec, tables: ReadoutTables, as_of: date) -> Check:
    """The orders feed's health (see the module docstring); id `orders`."""
    from scipy import stats
    c = tables.counts
    rows = int(c.get("order_rows", 0))
    aside = {why: int(c.get(k, 0)) for k, why in SET_ASIDE if c.get(k, 0)}
    used = rows - sum(aside.values())
    unmatched = int(c.get("orders_unmatched", 0))
    matched = used - unmatched
    figs: dict[str, Figure] = {
        "order_rows": Figure(label="order rows in the file", value=rows, unit="count"),
        "orders_used": Figure(label="order rows used", value=used, unit="count"),
        "match_rate": Figure(label="order rows whose key matches a visit", value=matched / used if used else None,
                             unit="share", numerator=matched if used else None, denominator=used if used else None),
    }
    if rows == 0:
        return Check(id="orders", title=TITLE, status="fail", figures=figs,
                     summary="The orders file has no data rows, so no effect can be read: export the orders of "
                             "the test's days and run the readout again.")
    if used <= 0:
        why = ", ".join(f"{n:,} with {w}" for w, n in aside.items())
        return Check(id="orders", title=TITLE, status="fail", figures=figs,
                     summary=f"Every one of the {rows:,} order rows was set aside ({why}), so no effect can be "
                             "read: check the orders' time zone and the --as-of date, and the columns mapped "
                             "in [readout.orders].")
    parts: list[tuple[Status, str]] = []
    share_un = unmatched / used
    if share_un > UNMATCHED_FAIL:
        parts.append(("fail", f"{share_un:.1%} of the {used:,} order rows used ({unmatched:,}) match no visit: the "
                              "orders are keyed by another id than the visits (a customer key, a hashed or "
                              "prefixed id), so the readout compares a fraction of the orders; map the right "
                              "column in [readout.orders]"))
    elif share_un > UNMATCHED_WARN:
        parts.append(("warn", f"{share_un:.1%} of the order rows used ({unmatched:,} of {used:,}) match no visit "
                              "(orders by people the tag never saw, or an id mismatch)"))
    arms = tables.arms
    units = {a: tables.final[a].n for a in arms}
    orders = {a: max(tables.final[a].total("orders"), 0.0) for a in arms}
    n_units, n_orders = sum(units.values()), sum(orders.values())
    rows_cov = []
    if matched > 0 and n_orders <= 0:
        parts.append(("fail", f"none of the {matched:,} matched order rows falls in a unit's outcome window"))
    for a in arms:
        share_u = units[a] / n_units if n_units else 0.0
        ratio = (orders[a] / units[a]) / (n_orders / n_units) if units[a] and n_orders and n_units else None
        p = float(stats.binom.cdf(round(orders[a]), round(n_orders), share_u)) if n_orders and share_u else None
        rows_cov.append([a, units[a], int(round(orders[a])), None if ratio is None else round(ratio, 4), p])
        if ratio is not None and p is not None and ratio < COVERAGE_FAIL and p < COVERAGE_P:
            parts.append(("fail", f"arm {a} has {ratio:.0%} of the orders per unit of all arms together "
                                  f"({int(round(orders[a])):,} orders for {units[a]:,} units): the export covers "
                                  "some arms only (a filter on the arm, or a vendor's own export)"))
    health = feed_health("orders", tables.orders_daily, as_of, since=spec.start.date())
    if health.status != "pass" and health.last is not None:
        parts.append((health.status, feed_sentence(health, "order rows")))
    status = worst([s for s, _ in parts])
    if parts:
        text = "; ".join(t for _, t in parts)
        summary = text[:1].upper() + text[1:] + ("." if status == "warn" else
                                                 ". The readout is not trustworthy until the orders are fixed.")
    else:
        summary = (f"{matched:,} of the {used:,} order rows used ({matched / used:.1%}) match a visit, every arm "
                   "has its share of the orders, and the feed reaches the as-of date.")
    if aside:
        summary += " Set aside: " + ", ".join(f"{n:,} with {w}" for w, n in aside.items()) + "."
    figs["orders_days_behind"] = Figure(label="days the orders feed is behind", value=health.behind, unit="count")
    tables_out = [Table(title="Orders per arm (in the outcome window) against the arm's units",
                        columns=["arm", "units", "orders", "orders per unit / all arms", "p (so few by chance)"],
                        rows=rows_cov)]
    return Check(id="orders", title=TITLE, status=status, summary=summary, figures=figs, tables=tables_out)


SPEND_TITLE = "Spend feed (days covered)"


def check_spend(spec: Spec, by_day: dict[date, float], as_of: date) -> Check:
    """The spend file's health (id `spend`): it must reach the as-of date, or iROAS divides the
    revenue of every day by the spend of fewer days. FAIL when it covers no test day or ends two or
    more days before the as-of date; WARN for test days without a spend row inside its span."""
    start = spec.start.date()
    days = sorted(d for d, v in by_day.items() if start <= d <= as_of)
    figs: dict[str, Figure] = {"spend_days": Figure(label="test days with spend", value=len(days), unit="count")}
    if not days:
        return Check(id="spend", title=SPEND_TITLE, status="fail", figures=figs,
                     summary=f"The spend file has no row on the test's days ({start} to {as_of}): iROAS, ROI and cost "
                             "per buyer would divide by nothing; export the spend of the test's days.")
    behind = (as_of - days[-1]).days
    span = (days[-1] - max(days[0], start)).days + 1
    gaps = span - len(days)
    figs["spend_days_behind"] = Figure(label="days the spend feed is behind", value=behind, unit="count")
    if behind >= 2:
        return Check(id="spend", title=SPEND_TITLE, status="fail", figures=figs,
                     summary=f"The spend file ends on {days[-1]}, {behind} days before the as-of date {as_of}: the "
                             "revenue of those days would be set against no spend, overstating iROAS; export the "
                             "spend up to the as-of date or choose an earlier --as-of.")
    if gaps or behind == 1:
        what = []
        if behind == 1:
            what.append(f"it ends on {days[-1]}, a day before the as-of date")
        if gaps:
            what.append(f"{gaps} day(s) between {days[0]} and {days[-1]} have no spend row")
        return Check(id="spend", title=SPEND_TITLE, status="warn", figures=figs,
                     summary="The spend file may be incomplete: " + "; ".join(what)
                             + " (days the channel did not run are fine; an export gap understates spend).")
    return Check(id="spend", title=SPEND_TITLE, status="pass", figures=figs,
                 summary=f"The spend file covers every day from {days[0]} to the as-of date {as_of}.")
