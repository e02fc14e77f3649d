"""Does the readout's test keep its level and power for this shop's revenue shape? A fast seeded simulation.

The readout reads revenue per unit with Welch's unequal-variance t-test (readout.stats.welch: the t
quantile at the Welch-Satterthwaite degrees of freedom), or with CUPED and the same Welch test on the
adjusted values. With skewed revenue and a small holdout that test rejects a true null more often than
alpha and detects a real effect less often than the normal arithmetic says, so every design the planner
recommends is first simulated as the readout would read it.

Revenue per unit is zero-inflated lognormal: a share p of units buy, once, an order value lognormal with
the order values' mean and SD (from --conversion and the order values, or from the pre-period files;
without them, the p at which order values have a coefficient of variation of 1, a modelling choice). From
the pre-period files the shop's own revenue is resampled instead (`Empirical`: the share of units with
revenue, and those units' revenues), when the mean and SD are the files' own. The ad raises the exposed arm's buying share so its mean rises by the arm-level difference. Per simulated test
each arm needs only its sum and sum of squares: buyers ~ Binomial(units, share); with at most EXACT_BUYERS
expected buyers every order value is drawn; above that, the order values above a high threshold (about
TAIL_DRAWS a test, the rare large orders that make revenue skewed) are drawn exactly and the sum and sum of
squares of the many below it are drawn jointly normal with the truncated lognormal's exact moments (a
central limit for bounded values). With CUPED (rho) the test is simulated on the same shape with the
effect scaled by 1 / sqrt(1 - rho^2): the adjusted values are taken to have revenue's shape with
(1 - rho^2) of its variance.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from armlock.shared.power import N01

SIMS = 2000  # simulated tests per design: the rejection rate's Monte Carlo SE is 0.5 points at 5%, 0.9 at 80%
EXACT_BUYERS = 300
TAIL_DRAWS = 40
SEED = 20_261_205


@dataclass(frozen=True)
class Shape:
    """Zero-inflated lognormal revenue per unit: a share `p` buys once, order value lognormal(mu, sigma)."""

    p: float
    mu: float
    sigma: float

    @property
    def order_mean(self) -> float:
        return math.exp(self.mu + self.sigma ** 2 / 2)

    def draw(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.lognormal(self.mu, self.sigma, size)

    def split(self, tail: float) -> tuple[float, Callable[[np.random.Generator, int], np.ndarray], list[float]]:
        """Above a threshold with probability `tail`: (that probability, a sampler of the values above it, the
        first four moments of the values below it)."""
        a = -N01.inv_cdf(tail)
        c = math.exp(self.mu + self.sigma * a)

        def above(rng: np.random.Generator, size: int) -> np.ndarray:
            return np.exp(self.mu + self.sigma * _tail_normals(rng, a, size))

        return tail, above, [self.moment(j, c) / (1 - tail) for j in (1, 2, 3, 4)]

    def moment(self, k: int, below: float = math.inf) -> float:
        """E[V^k; V < below] of one order value V (the whole moment when below is infinite)."""
        full = math.exp(k * self.mu + k * k * self.sigma ** 2 / 2)
        if math.isinf(below):
            return full
        return full * N01.cdf((math.log(below) - self.mu - k * self.sigma ** 2) / self.sigma)


@dataclass(frozen=True)
class Empirical:
    """The pre-period's own revenue: a share `p` of units have non-zero revenue, resampled from `values`
    (the non-zero per-unit revenues, sorted)."""

    p: float
    values: np.ndarray

    @property
    def mu(self) -> float:
        return math.nan

    @property
    def sigma(self) -> float:
        return math.nan

    @property
    def order_mean(self) -> float:
        return float(self.values.mean())

    def draw(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return self.values[rng.integers(0, len(self.values), size)]

    def split(self, tail: float) -> tuple[float, Callable[[np.random.Generator, int], np.ndarray], list[float]]:
        n = len(self.values)
        m = min(n - 1, max(1, round(tail * n)))  # the m largest values are drawn exactly
        top, rest = self.values[n - m:], self.values[:n - m]

        def above(rng: np.random.Generator, size: int) -> np.ndarray:
            return top[rng.integers(0, m, size)]

        return m / n, above, [float(np.mean(rest ** j)) for j in (1, 2, 3, 4)]


def empirical(per_unit: np.ndarray, largest_lift: float = 0.0) -> Empirical | None:
    """The resampled shape from per-unit revenue (None with fewer than 30 buyers: too few to resample)."""
    y = np.asarray(per_unit, dtype=float)
    nz = np.sort(y[y != 0])
    if len(nz) < 30 or nz.mean() <= 0:
        return None
    p = len(nz) / len(y)
    if p * (1 + max(largest_lift, 0.0)) > 0.999:
        return None  # no room to raise the buying share: the parametric shape makes room
    return Empirical(p=p, values=nz)


def shape_of(mean: float, sd: float, conversion: float | None = None, order_value_sd: float | None = None,
             largest_lift: float = 0.0) -> Shape:
    """The zero-inflated lognormal with revenue per unit's mean and SD (and conversion, when known).

    The ad works by raising the buying share, so the share must leave room for the largest relative lift
    simulated: p (1 + lift) <= 0.999 (a higher share is lowered to that, keeping the mean and SD)."""
    room = 0.999 / (1 + max(largest_lift, 0.0))
    if conversion is not None and conversion > room:
        conversion, order_value_sd = room, None
    if conversion is not None and order_value_sd:
        p = conversion
        v = mean / p
        s2 = order_value_sd ** 2
    else:
        # without a conversion rate: the one at which order values have a coefficient of variation of 1
        # (p (s^2 + v^2) = sd^2 + mean^2 with s = v gives p = 2 mean^2 / (sd^2 + mean^2)); a known p fixes s
        p = conversion if conversion is not None else 2 * mean ** 2 / (sd ** 2 + mean ** 2)
        p = min(p, room)
        v = mean / p
        s2 = (sd ** 2 + mean ** 2) / p - v ** 2
        if s2 <= 0:  # conversion too high for this SD: the order values carry no spread beyond a floor
            s2 = 1e-6 * v ** 2
    sigma2 = math.log(1 + s2 / v ** 2)
    return Shape(p=p, mu=math.log(v) - sigma2 / 2, sigma=math.sqrt(sigma2))


def _tail_normals(rng: np.random.Generator, a: float, size: int) -> np.ndarray:
    """Standard normals conditioned on exceeding a (Robert 1995, Stat. Comput. 5, exponential rejection)."""
    out = np.empty(size)
    filled = 0
    lam = (a + math.sqrt(a * a + 4)) / 2
    while filled < size:
        need = size - filled
        if a < 0.5:
            z = rng.standard_normal(need * 3 + 16)
            z = z[z > a]
        else:
            z = a + rng.exponential(1.0, need * 2 + 16) / lam
            z = z[rng.random(z.size) < np.exp(-((z - lam) ** 2) / 2)]
        z = z[:need]
        out[filled:filled + z.size] = z
        filled += z.size
    return out


def _arm(rng: np.random.Generator, n: int, q: float, s: Shape | Empirical, sims: int) -> tuple[np.ndarray, np.ndarray]:
    """Per simulated test: the arm's revenue sum and sum of squares over n units buying with share q."""
    k = rng.binomial(n, min(max(q, 0.0), 1.0), sims)
    idx = np.arange(sims)
    if n * q <= EXACT_BUYERS:
        vals = s.draw(rng, int(k.sum()))
        who = np.repeat(idx, k)
        return np.bincount(who, vals, sims), np.bincount(who, vals * vals, sims)
    tail, above, (m1, m2, m3, m4) = s.split(TAIL_DRAWS / (n * q))
    big = rng.binomial(k, tail)
    vals = above(rng, int(big.sum()))
    who = np.repeat(idx, big)
    S = np.bincount(who, vals, sims)
    Q = np.bincount(who, vals * vals, sims)
    small = (k - big).astype(float)
    cov = np.array([[m2 - m1 * m1, m3 - m1 * m2], [m3 - m1 * m2, m4 - m2 * m2]])
    try:
        chol = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        chol = np.diag(np.sqrt(np.maximum(np.diag(cov), 0.0)))
    e = rng.standard_normal((sims, 2)) @ chol.T * np.sqrt(small)[:, None]
    return S + small * m1 + e[:, 0], Q + small * m2 + e[:, 1]


def t_quantile(p: float, df: np.ndarray) -> np.ndarray:
    """Upper p-quantile of Student's t at (non-integer) df: the expansion of Abramowitz & Stegun 1964,
    Handbook of Mathematical Functions, 26.7.5, from 30 degrees of freedom up (checked against scipy in
    tests/plan/test_soundness.py); below that scipy's own inverse (imported only then: the plan starts fast)."""
    if df.size and float(np.min(df)) < 30:
        from scipy.special import stdtrit

        return np.asarray(stdtrit(np.maximum(df, 1.0), 1 - p))
    z = -N01.inv_cdf(p)
    v = np.maximum(df, 3.0)
    g1 = (z ** 3 + z) / 4
    g2 = (5 * z ** 5 + 16 * z ** 3 + 3 * z) / 96
    g3 = (3 * z ** 7 + 19 * z ** 5 + 17 * z ** 3 - 15 * z) / 384
    g4 = (79 * z ** 9 + 776 * z ** 7 + 1482 * z ** 5 - 1920 * z ** 3 - 945 * z) / 92160
    return z + g1 / v + g2 / v ** 2 + g3 / v ** 3 + g4 / v ** 4


def rejection_rate(s: Shape | Empirical, n_h: int, n_e: int, diff: float, *, alpha: float, null: float = 0.0,
                   sims: int = SIMS, seed: int = SEED) -> float:
    """Share of simulated tests in which the readout's Welch test rejects 'the arm difference is `null`'
    (two-sided, level alpha) when the true arm-level difference in revenue per unit is `diff`."""
    rng = np.random.default_rng(seed)
    v = s.order_mean
    sh, qh = _arm(rng, n_h, s.p, s, sims)
    se_, qe = _arm(rng, n_e, s.p + diff / v, s, sims)
    mh, me = sh / n_h, se_ / n_e
    vh = np.maximum(qh - sh * mh, 0.0) / (n_h - 1) / n_h
    ve = np.maximum(qe - se_ * me, 0.0) / (n_e - 1) / n_e
    se2 = vh + ve
    ok = se2 > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        df = se2 ** 2 / (vh ** 2 / (n_h - 1) + ve ** 2 / (n_e - 1))
        t = (me - mh - null) / np.sqrt(se2)
    crit = t_quantile(alpha / 2, np.where(ok, df, 3.0))
    return float(np.mean(ok & (np.abs(t) > crit)))
