"""The readout's engine-neutral sufficient statistics: moment sums per arm and per weekly look.

An engine (pandas or Spark, `audit.engine.Engine.readout`) fills `ReadoutTables`; the statistics
read only these, never the raw rows. Everything is a sum over units, so tables of disjoint slices of units add up
(`Moments.__add__`), which is how a distributed engine would combine its partitions.

Per unit the engine builds these variables (names in `VARIABLES`, then one per covariate):

- ``revenue``  the unit's revenue in its outcome window (refunds included, after the cap if any)
- ``orders``   the unit's distinct orders in its outcome window
- ``buyer``    1 if the unit placed at least one order in the window, else 0
- ``exposed``  1 if the vendor's log shows an exposure of the unit during the test, else 0
- ``cov:<c>``  each pre-period covariate of the visits file (an empty cell: the pooled mean)

For a group of units, `Moments` keeps n, the mean of each variable and the central cross-product
matrix (co-moments; squared deviations on its diagonal). Means, variances and covariances of any
of them, in any arm, follow, and so do the Welch, delta-method, CUPED and Wald statistics
(`readout.stats`). Both engines build them exactly (`readout.rules`: means and central
cross-products from exact sums), so their tables agree bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

VARIABLES = ("revenue", "orders", "buyer", "exposed")
COV_PREFIX = "cov:"


@dataclass
class Moments:
    """n, means and central cross-products of `names` over one group of units (one arm, one look).

    Kept as central moments (mean vector and M2 = sum of (x - mean)(x - mean)^T) rather than raw
    sums of squares, so a variable with a large mean keeps its variance exactly; two groups merge
    with the pairwise update of Chan, Golub & LeVeque (1979, "Updating formulae and a pairwise
    algorithm for computing sample variances"), as the audit's balance tables do.
    """

    names: tuple[str, ...]
    n: int
    means: np.ndarray  # shape (k,)
    m2: np.ndarray  # shape (k, k): sum over units of (x_a - mean_a)(x_b - mean_b)

    @classmethod
    def of(cls, names: tuple[str, ...] | list[str], data: np.ndarray) -> Moments:
        """Moments of the rows of `data` (units x variables, float64)."""
        data = np.asarray(data, dtype=np.float64).reshape(-1, len(names))
        if not len(data):
            return cls.empty(names)
        mean = data.mean(axis=0)
        centred = data - mean
        return cls(tuple(names), int(data.shape[0]), mean, centred.T @ centred)

    @classmethod
    def empty(cls, names: tuple[str, ...] | list[str]) -> Moments:
        k = len(names)
        return cls(tuple(names), 0, np.zeros(k), np.zeros((k, k)))

    def __add__(self, other: Moments) -> Moments:
        if self.names != other.names:
            raise ValueError("cannot add moments of different variables")
        if not other.n:
            return self
        if not self.n:
            return other
        n = self.n + other.n
        delta = other.means - self.means
        return Moments(self.names, n, self.means + delta * (other.n / n),
                       self.m2 + other.m2 + np.outer(delta, delta) * (self.n * other.n / n))

    def index(self, name: str) -> int:
        return self.names.index(name)

    def total(self, name: str) -> float:
        return float(self.means[self.index(name)] * self.n)

    def mean(self, name: str) -> float:
        return float(self.means[self.index(name)]) if self.n else float("nan")

    def cov(self, a: str, b: str) -> float:
        """Sample covariance (ddof = 1) of two variables; the variance when a == b."""
        if self.n < 2:
            return float("nan")
        return float(self.m2[self.index(a), self.index(b)] / (self.n - 1))

    def var(self, name: str) -> float:
        return self.cov(name, name)

    def to_dict(self) -> dict[str, object]:
        return {"names": list(self.names), "n": self.n, "means": self.means.tolist(), "m2": self.m2.tolist()}


@dataclass
class ReadoutTables:
    """Everything the readout's statistics need, per arm (spec order).

    `final`: each arm's moments at the as-of date (units whose outcome window is complete).
    `looks`: [(look date YYYY-MM-DD, {arm: Moments})] at the end of each look day (weekly from
    the start, the as-of date last), each unit's outcome counted up to that day: what a reader
    would have seen then. A look's moments hold only what its estimate reads: revenue and the
    covariates (`readout.rules.look_names`). `attributed` is the revenue the orders log credits to the channel.
    `counts` holds what was set aside or changed, for the input notes (see `readout.run`).
    """

    arms: list[str]
    covariates: list[str]
    final: dict[str, Moments]
    looks: list[tuple[str, dict[str, Moments]]] = field(default_factory=list)
    attributed: float | None = None
    counts: dict[str, float] = field(default_factory=dict)
    # Per unit, embedded engines only (pandas, DuckDB): (ids, first-seen times, outcome revenue) of
    # the units in `final`, for the 2x2 readout with a concurrent test (`readout/factorial.py`).
    # A distributed engine leaves it None, and that readout says it needs an embedded engine.
    units: tuple[Any, Any, Any] | None = None
    # Order rows per UTC day of their time (YYYY-MM-DD -> rows), every row kept after the as-of cut
    # and the set-aside rules, matched to a visit or not: the feed-health check reads where the
    # orders end and their outage days. pandas: a bincount of day numbers; Spark: a group-by on the day.
    orders_daily: dict[str, int] = field(default_factory=dict)
