"""The readout's engine-neutral sufficient statistics: moment sums per arm and per weekly look.

An engine (pandas now, Spark later) fills `ReadoutTables`; the statistics read only these, never
the raw rows. Everything is a sum over units, so tables of disjoint slices of units add up
(`Moments.__add__`), which is how a distributed engine would combine its partitions.

Per unit the engine builds these variables (names in `VARIABLES`, then one per covariate):

- ``revenue``  the unit's revenue in its outcome window (refunds included, after the cap if any)
- ``orders``   the unit's distinct orders in its outcome window
- ``buyer``    1 if the unit placed at least one order in the window, else 0
- ``exposed``  1 if the vendor's log shows an exposure of the unit during the test, else 0
- ``cov:<c>``  each pre-period covariate of the visits file (an empty cell: the pooled mean)

For a group of units, `Moments` keeps n, the sum of each variable and the sum of each product of
two variables (the full cross-product matrix, squares on its diagonal). Means, variances and
covariances of any of them, in any arm, follow, and so do the Welch, delta-method, CUPED and
Wald statistics (`readout.stats`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

VARIABLES = ("revenue", "orders", "buyer", "exposed")
COV_PREFIX = "cov:"


@dataclass
class Moments:
    """n, sums and cross-product sums of `names` over one group of units (one arm, one look)."""

    names: tuple[str, ...]
    n: int
    sums: np.ndarray  # shape (k,): sum of each variable
    cross: np.ndarray  # shape (k, k): sum over units of x_a * x_b

    @classmethod
    def of(cls, names: tuple[str, ...] | list[str], data: np.ndarray) -> Moments:
        """Moments of the rows of `data` (units x variables, float64)."""
        data = np.asarray(data, dtype=np.float64).reshape(-1, len(names))
        return cls(tuple(names), int(data.shape[0]), data.sum(axis=0), data.T @ data)

    @classmethod
    def empty(cls, names: tuple[str, ...] | list[str]) -> Moments:
        k = len(names)
        return cls(tuple(names), 0, np.zeros(k), np.zeros((k, k)))

    def __add__(self, other: Moments) -> Moments:
        if self.names != other.names:
            raise ValueError("cannot add moments of different variables")
        return Moments(self.names, self.n + other.n, self.sums + other.sums, self.cross + other.cross)

    def index(self, name: str) -> int:
        return self.names.index(name)

    def total(self, name: str) -> float:
        return float(self.sums[self.index(name)])

    def mean(self, name: str) -> float:
        return self.total(name) / self.n if self.n else float("nan")

    def cov(self, a: str, b: str) -> float:
        """Sample covariance (ddof = 1) of two variables; the variance when a == b."""
        if self.n < 2:
            return float("nan")
        i, j = self.index(a), self.index(b)
        return float((self.cross[i, j] - self.sums[i] * self.sums[j] / self.n) / (self.n - 1))

    def var(self, name: str) -> float:
        return self.cov(name, name)

    def to_dict(self) -> dict[str, object]:
        return {"names": list(self.names), "n": self.n, "sums": self.sums.tolist(),
                "cross": self.cross.tolist()}


@dataclass
class ReadoutTables:
    """Everything the readout's statistics need, per arm (spec order).

    `final`: each arm's moments at the as-of date (units whose outcome window is complete).
    `looks`: [(look date YYYY-MM-DD, {arm: Moments})] at the end of each look day (weekly from
    the start, the as-of date last), each unit's outcome counted up to that day: what a reader
    would have seen then. `attributed` is the revenue the orders log credits to the channel.
    `counts` holds what was set aside or changed, for the input notes (see `readout.run`).
    """

    arms: list[str]
    covariates: list[str]
    final: dict[str, Moments]
    looks: list[tuple[str, dict[str, Moments]]] = field(default_factory=list)
    attributed: float | None = None
    counts: dict[str, float] = field(default_factory=dict)
