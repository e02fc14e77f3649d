"""From the shop's pre-period files to planning numbers: weekly traffic, revenue per unit, conversion, rho.

I/O edge of the planner. Files are read with the audit's reader (same formats, same clear errors naming
file, column and rows); every row set aside is counted and noted, never dropped silently.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from armlock.assign import InputError
from armlock.audit.read import Source, _header, read_ids, read_mapped, read_numbers, read_times

from .model import Estimate

MIN_RHO = 0.05  # a weaker correlation shrinks the variance by under 0.25%: not worth planning on
MIN_UNITS = 30  # fewer units than this cannot give a usable SD or correlation (common practice)


@dataclass(frozen=True)
class PrePeriodColumns:
    """Where the planner finds its columns: visits as in the spec's `[audit.visits]`, orders as in the readout."""

    unit_id: str = "unit_id"
    first_seen: str = "first_seen"
    orders_unit_id: str = "unit_id"
    orders_revenue: str = "revenue"
    orders_order_id: str = ""  # optional: an order id repeated in the file is counted once (as the readout does)
    covariates: Sequence[str] = ("pre_orders", "pre_revenue")  # tried in turn; the best correlated is used
    covariate_explicit: bool = False  # True when the user named the covariate: then it must exist
    visits_delimiter: str = ","  # CSV delimiters and the first-seen time format, as in the spec's column maps
    orders_delimiter: str = ","
    first_seen_format: str = "iso8601"


@dataclass
class PrePeriod:
    """What the files say: PlanInputs keyword values, how each was estimated, and input notes."""

    values: dict[str, float]
    estimates: list[Estimate] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _set_aside(src: Source, mask: np.ndarray, what: str, notes: list[str]) -> None:
    n = int(mask.sum())
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) {what} ({src.rows(np.flatnonzero(mask), n)}) were set aside")


def _visits(path: Path, cols: PrePeriodColumns, notes: list[str]) -> tuple[pd.DataFrame, list[str], Source]:
    if cols.covariate_explicit:
        present = _header(Source(path, "visits"), cols.visits_delimiter, [])
        for c in cols.covariates:
            if c not in present:
                raise InputError(f"{path}: column '{c}' (--covariate) not found in the visits file; the file has "
                                 f"columns: {', '.join(present) or '(none)'}")
    # the audit's one reader: BOM, delimiter, duplicate and nested columns, damaged files (audit/read.py)
    optional = {f"covariate {c}": c for c in dict.fromkeys(cols.covariates) if c not in (cols.unit_id, cols.first_seen)}
    mapped = read_mapped(path, "visits", "[audit.visits]", {"unit_id": cols.unit_id, "first_seen": cols.first_seen},
                         notes, optional=optional, delimiter=cols.visits_delimiter)
    src, table = mapped.src, mapped.table
    covs = [c for k, c in mapped.columns.items() if k.startswith("covariate ")]
    ids, empty = read_ids(src, table, cols.unit_id, notes)
    frame = pd.DataFrame({"unit": ids, "time": read_times(src, table, cols.first_seen, notes, cols.first_seen_format,
                                                          "[audit.visits] first_seen_format")})
    for c in covs:
        frame[c] = read_numbers(src, table, c).to_numpy()
    _set_aside(src, empty, f"with an empty '{cols.unit_id}'", notes)
    no_time = frame["time"].isna().to_numpy() & ~empty
    _set_aside(src, no_time, f"without a '{cols.first_seen}' time", notes)
    frame = frame[~(empty | no_time)].sort_values("time", kind="stable")
    dup = frame["unit"].duplicated(keep="first").to_numpy()
    if dup.any():
        notes.append(f"{src.path.name}: {int(dup.sum()):,} repeated row(s) of a unit; the earliest of each was kept")
        frame = frame[~dup]
    if len(frame) < MIN_UNITS:
        raise InputError(f"{path}: only {len(frame):,} usable unit(s) in the visits file; the planner needs at least "
                         f"{MIN_UNITS} to estimate traffic and the spread of revenue")
    return frame.reset_index(drop=True), covs, src


def _orders(path: Path, cols: PrePeriodColumns, notes: list[str]) -> tuple[pd.Series, pd.Series, Source]:
    mapped = read_mapped(path, "orders", "[readout.orders]",
                         {"unit_id": cols.orders_unit_id, "revenue": cols.orders_revenue}, notes,
                         optional={"order_id": cols.orders_order_id}, delimiter=cols.orders_delimiter)
    src, table = mapped.src, mapped.table
    with_id = "order_id" in mapped.columns
    if table.num_rows == 0:
        raise InputError(f"{path}: the orders file has no orders (a header but no rows); the planner needs the "
                         "pre-period's orders to estimate revenue per unit")
    ids, empty = read_ids(src, table, cols.orders_unit_id, notes)
    revenue = read_numbers(src, table, cols.orders_revenue)
    _set_aside(src, empty, f"with an empty '{cols.orders_unit_id}'", notes)
    no_rev = revenue.isna().to_numpy() & ~empty
    _set_aside(src, no_rev, f"without a '{cols.orders_revenue}' value", notes)
    keep = ~(empty | no_rev)
    if with_id:
        oid, _ = read_ids(src, table, cols.orders_order_id, notes)
        rep = (oid.duplicated(keep="first") & (oid != "")).to_numpy() & keep
        if rep.any():
            notes.append(f"{src.path.name}: {int(rep.sum()):,} repeated order id(s) in '{cols.orders_order_id}' "
                         f"were counted once ({src.rows(np.flatnonzero(rep), int(rep.sum()))})")
            keep &= ~rep
    neg = int((revenue[keep] < 0).sum())
    if neg:
        notes.append(f"{src.path.name}: {neg:,} order(s) with negative revenue (refunds) were kept and count "
                     "against their unit")
    return ids[keep].reset_index(drop=True), revenue[keep].reset_index(drop=True), src


def estimate_pre_period(visits: str | Path, orders: str | Path, columns: PrePeriodColumns | None = None) -> PrePeriod:
    """Estimate weekly new units, revenue per unit (mean, SD), conversion, order value and rho from two files.

    A unit's revenue is the sum of its orders in the orders file (0 without orders); orders of units that
    are not in the visits file are counted and left out. rho is the correlation of revenue per unit with
    the best-correlated numeric pre-period column of the visits file (the spec's covariates).
    """
    cols = columns or PrePeriodColumns()
    notes: list[str] = []
    frame, covs, vsrc = _visits(Path(visits), cols, notes)
    ids, revenue, osrc = _orders(Path(orders), cols, notes)
    n = len(frame)
    known = ids.isin(frame["unit"]).to_numpy()
    if not known.any():
        raise InputError(
            f"{osrc.path}: none of its {len(ids):,} order(s) belongs to a unit of the visits file {vsrc.path.name} "
            f"(orders column '{cols.orders_unit_id}', visits column '{cols.unit_id}'); check that both hold the same ids")
    if not known.all():
        lost = int((~known).sum())
        notes.append(f"{osrc.path.name}: {lost:,} order(s) of {len(ids):,} belong to units not in the visits file "
                     f"and were left out ({revenue[~known].sum():,.2f} of revenue)")
    per_unit = revenue[known].groupby(ids[known].to_numpy()).sum()
    y = per_unit.reindex(frame["unit"].to_numpy(), fill_value=0.0).to_numpy(dtype=float)
    buyers = int((per_unit.reindex(frame["unit"].to_numpy()).notna()).sum())
    n_orders = int(known.sum())
    mean, sd = float(y.mean()), float(y.std(ddof=1))
    if not sd > 0:
        raise InputError(f"{osrc.path}: every unit has the same revenue ({mean:g}); the spread of revenue cannot be "
                         "estimated from these files")
    if mean <= 0:
        raise InputError(f"{osrc.path}: revenue per unit is {mean:g} on average (refunds outweigh sales); "
                         "the planner needs a positive mean")
    first, last = frame["time"].iloc[0], frame["time"].iloc[-1]
    days = (last.date() - first.date()).days + 1
    weekly = n / (days / 7.0)
    if days < 7:
        notes.append(f"{vsrc.path.name}: only {days} day(s) of first visits; weekly traffic is scaled up from them "
                     "and misses the weekly cycle: a few weeks of history give a steadier estimate")
    values: dict[str, Any] = {"weekly_units": weekly, "revenue_mean": mean, "revenue_sd": sd,
                              "conversion": buyers / n, "order_value": float(revenue[known].sum()) / n_orders}
    est = [
        Estimate("weekly new units", weekly, n, f"{n:,} units first seen over {days} days, "
                 f"{first.date()} to {last.date()}"),
        Estimate("revenue per unit (mean)", mean, n, f"{n:,} units and their {n_orders:,} orders; "
                 "a unit without orders counts 0"),
        Estimate("revenue per unit (SD)", sd, n, f"{n:,} units"),
        Estimate("conversion", buyers / n, n, f"{buyers:,} of {n:,} units ordered"),
        Estimate("order value (mean)", values["order_value"], buyers, f"{n_orders:,} orders of {buyers:,} buyers"),
    ]
    best: tuple[float, str, int] | None = None
    for c in covs:
        x = frame[c].to_numpy(dtype=float)
        ok = ~np.isnan(x)
        if ok.sum() >= MIN_UNITS and np.std(x[ok]) > 0:
            r = float(np.corrcoef(x[ok], y[ok])[0, 1])
            if best is None or abs(r) > abs(best[0]):
                best = (r, c, int(ok.sum()))
            if not ok.all():
                notes.append(f"{vsrc.path.name}: '{c}' is empty for {int((~ok).sum()):,} unit(s); rho uses the others")
        else:
            notes.append(f"{vsrc.path.name}: '{c}' does not vary (or has fewer than {MIN_UNITS} values); not used for CUPED")
    if best is not None and abs(best[0]) < MIN_RHO:
        notes.append(f"{vsrc.path.name}: the best pre-period column, '{best[1]}', correlates only {best[0]:.3f} with "
                     f"revenue per unit (over {best[2]:,} units); too weak to plan on, so planned without CUPED")
        best = None
        covs = []
    if best is not None:
        values["rho"] = best[0]
        others = [c for c in covs if c != best[1]]
        est.append(Estimate("pre-period correlation (rho)", best[0], best[2],
                            f"correlation of revenue per unit with '{best[1]}' over {best[2]:,} units"
                            + (f" (the best of {', '.join([best[1], *others])})" if others else "")))
    elif not covs and not any("too weak" in n for n in notes):
        notes.append(f"{vsrc.path.name}: no pre-period column ({', '.join(cols.covariates) or 'none named'}) found; "
                     "planned without CUPED")
    notes.append("Revenue per unit is each unit's revenue from its first visit to the end of the orders file; "
                 "a test's window per unit may differ, so check the mean against the test you plan.")
    return PrePeriod(values=values, estimates=est, notes=notes)
