"""The readout's rules every engine shares: look dates, the pooled quantile, the covariate fill, exact moments.

An engine (pandas, Spark) computes sums over rows; these functions turn them into the same
values bit for bit, whatever the order in which the rows were added: means are exact sums
rounded once (`audit.exactsum`), and the central cross-products are exact sums of the centred
products `(x_a - mean_a) * (x_b - mean_b)` (two passes, as the audit's balance tables).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from datetime import date, timedelta
from fractions import Fraction

import numpy as np

from armlock.assign import Spec
from armlock.shared.exactsum import rounded_mean, to_float

from armlock.shared.readout_tables import COV_PREFIX, VARIABLES, Moments

Pick = Callable[[int], float]


def look_dates(spec: Spec, as_of: date) -> list[date]:
    """The end day of each look: every `look_days` days from the start, and the as-of date last."""
    step = spec.readout.look_days
    first = spec.start.date()
    out = []
    d = first + timedelta(days=step - 1)
    while d < as_of:
        out.append(d)
        d += timedelta(days=step)
    return out + [as_of]


def final_names(covariates: Sequence[str]) -> tuple[str, ...]:
    """The variables of the final moments: revenue, orders, buyer, exposed, then each covariate."""
    return (*VARIABLES, *(COV_PREFIX + c for c in covariates))


def look_names(covariates: Sequence[str]) -> tuple[str, ...]:
    """The variables of a weekly look: what its estimate reads (revenue, and the covariates for CUPED)."""
    return ("revenue", *(COV_PREFIX + c for c in covariates))


def pairs(k: int) -> list[tuple[int, int]]:
    """The (a, b) index pairs with a <= b of k variables: the cells of a symmetric cross-product matrix."""
    return [(a, b) for a in range(k) for b in range(a, k)]


def means_of(n: int, sums: Sequence[Fraction | int]) -> np.ndarray:
    """Each variable's mean, its exact sum rounded once (0 when n is 0, as `Moments.empty`)."""
    return np.array([rounded_mean(Fraction(s), n) if n else 0.0 for s in sums], dtype=np.float64)


def moments_of(names: tuple[str, ...], n: int, means: np.ndarray, cross: Sequence[Fraction | int]) -> Moments:
    """`Moments` from n, the means and the exact sums of centred products (in `pairs` order)."""
    k = len(names)
    if not n:
        return Moments.empty(names)
    m2 = np.zeros((k, k))
    for (a, b), s in zip(pairs(k), cross):
        m2[a, b] = m2[b, a] = to_float(Fraction(s))
    return Moments(names, n, np.asarray(means, dtype=np.float64), m2)


def linear_quantile(n: int, q: float, pick: Pick) -> float:
    """The q quantile of n values by numpy's default rule ("linear", Hyndman & Fan 1996 type 7),
    with numpy's own arithmetic, so an engine that can only pick order statistics agrees with
    `numpy.quantile` bit for bit. `pick(i)` is the i-th smallest value (0-based)."""
    vi = (n - 1) * q  # numpy: the virtual index
    if vi >= n - 1:
        return pick(n - 1)
    lo = math.floor(vi)
    a, b = pick(lo), pick(lo + 1)
    g = vi - lo
    diff = b - a
    return b - diff * (1 - g) if g >= 0.5 else a + diff * g  # numpy's _lerp, both branches


def fill_value(total: Fraction | int, finite: int, pos_inf: int = 0, neg_inf: int = 0) -> float:
    """The pooled mean an empty covariate cell gets: the mean of the values present (exact, rounded
    once); infinities give what IEEE arithmetic gives; no value at all gives 0."""
    if pos_inf and neg_inf:
        return float("nan")
    if pos_inf or neg_inf:
        return float("inf") if pos_inf else float("-inf")
    return rounded_mean(Fraction(total), finite) if finite else 0.0
