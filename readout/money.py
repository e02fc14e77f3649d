"""Money from the per-unit effect: incremental revenue and profit, iROAS, ROI, cost per incremental buyer.

Spend is taken as known (no interval of its own); every interval here is the per-unit
difference's interval carried through a positive scale, so coverage is inherited.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, timedelta

from .stats import NAN, Estimate


@dataclass
class MoneyFigures:
    """The channel's money figures; None where an input (spend, attribution) was not given."""

    exposed_units: int
    incremental_revenue: Estimate
    incremental_profit: Estimate
    spend: float | None
    iroas: Estimate | None  # incremental revenue / spend
    roi: Estimate | None  # (incremental profit - spend) / spend
    incremental_buyers: Estimate
    cost_per_incremental_buyer: tuple[float, float, float] | None  # value, lo, hi (hi inf: unbounded)
    attributed_revenue: float | None
    attributed_roas: float | None  # attributed revenue / spend
    incremental_to_attributed: Estimate | None  # incremental / attributed revenue


def cost_per_buyer(spend: float, buyers: Estimate) -> tuple[float, float, float]:
    """spend / incremental buyers, with the interval of the buyers inverted (unbounded when it
    reaches zero or below: the data cannot rule out that the channel added no buyer)."""
    value = spend / buyers.value if buyers.value > 0 else math.inf
    lo = spend / buyers.hi if buyers.hi > 0 else math.inf
    hi = spend / buyers.lo if buyers.lo > 0 else math.inf
    return value, lo, hi


def money(*, revenue_per_unit: Estimate, buyers_per_unit: Estimate, exposed_units: int, margin: float,
          spend: float | None, attributed: float | None) -> MoneyFigures:
    """Scale per-unit differences (exposed - holdout) to the exposed arm(s)' units and to spend."""
    inc = revenue_per_unit.scaled(exposed_units)
    profit = inc.scaled(margin)
    buyers = buyers_per_unit.scaled(exposed_units)
    has_spend = spend is not None and spend > 0
    iroas = inc.scaled(1 / spend) if has_spend else None  # type: ignore[operator]
    roi = profit.scaled(1 / spend, shift=-1.0) if has_spend else None  # type: ignore[operator]
    ratio = inc.scaled(1 / attributed) if attributed else None
    return MoneyFigures(
        exposed_units=exposed_units, incremental_revenue=inc, incremental_profit=profit,
        spend=spend, iroas=iroas, roi=roi, incremental_buyers=buyers,
        cost_per_incremental_buyer=cost_per_buyer(spend, buyers) if has_spend else None,  # type: ignore[arg-type]
        attributed_revenue=attributed,
        attributed_roas=(attributed / spend if has_spend and attributed is not None else None),  # type: ignore[operator]
        incremental_to_attributed=ratio,
    )


def window_spend(spend_by_day: dict[date, float], new_units: dict[date, int], window: int, as_of: date) -> float:
    """The spend that belongs to the units and days a `window`-day readout measures.

    The readout counts each included unit's revenue over its own window (first-seen day f to
    f + window, units with f <= as_of - window), so spend is allocated the same way: each day's
    spend is shared equally among the exposed units seen so far (a unit-day share, common
    practice for always-on retargeting), and the shares of included units inside their window
    are summed. `new_units` is the exposed arms' new units per first-seen day. With the
    "to_as_of" window every unit counts every day, and the whole spend is kept.
    """
    last_included = as_of - timedelta(days=window)
    total = 0.0
    for d, amount in spend_by_day.items():
        seen = sum(n for f, n in new_units.items() if f <= d)
        if not seen:
            continue
        inside = sum(n for f, n in new_units.items() if f <= min(d, last_included) and d < f + timedelta(days=window))
        total += amount * inside / seen
    return total


__all__ = ["MoneyFigures", "cost_per_buyer", "money", "window_spend", "NAN"]
