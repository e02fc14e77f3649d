"""Calibration by simulation: how often the readout's intervals miss a known effect (tests and scripts).

Simulated holdout tests with heavy-tailed revenue (most units buy nothing; buyers' revenue is
lognormal), a known true difference in revenue per unit, and a pre-period covariate correlated
with revenue. The test suite runs small versions; `scripts/readout_calibration.py` the large ones
whose figures are in docs/readout-methods.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from armlock.shared.confseq import anytime_factor
from .stats import cuped, relative_lift, welch
from armlock.shared.readout_tables import Moments

VALUE = (3.7, 0.8)  # buyers' revenue: lognormal, mean exp(3.7 + 0.32) ~ 55.7


def mean_value() -> float:
    return math.exp(VALUE[0] + VALUE[1] ** 2 / 2)


@dataclass
class Sequential:
    """Share of simulated tests whose interval excluded the truth at ANY weekly look."""

    tests: int
    weeks: int
    units: int  # per test at the last look (both arms)
    anytime_miss: float
    fixed_miss: float  # the fixed-horizon 95% interval, read at every look
    fixed_last_miss: float  # the fixed-horizon interval read once, at the last look


def _one_week(rng: np.random.Generator, acc: np.ndarray, per_week: int, holdout_share: float, p_holdout: float,
              p_exposed: float) -> list[np.ndarray]:
    """One week of new units in every simulated test: units, revenue sums and sums of squares added to
    `acc[arm]` (shape arms x 3 x tests); returns each arm's new buyers per test."""
    tests = acc.shape[2]
    n_h = rng.binomial(per_week, holdout_share, size=tests)
    out = []
    for arm, (n, p) in enumerate(((n_h, p_holdout), (per_week - n_h, p_exposed))):
        buyers = np.asarray(rng.binomial(n, p))
        vals = rng.lognormal(*VALUE, size=int(buyers.sum()))
        owner = np.repeat(np.arange(tests), buyers)
        acc[arm, 0] += n
        acc[arm, 1] += np.bincount(owner, vals, minlength=tests)
        acc[arm, 2] += np.bincount(owner, vals * vals, minlength=tests)
        out.append(buyers)
    return out


def sequential_misses(*, tests: int, weeks: int, per_week: int, p_holdout: float = 0.04,
                      p_exposed: float = 0.044, holdout_share: float = 0.5, alpha: float = 0.05,
                      seed: int = 0) -> Sequential:
    """Simulate `tests` tests read weekly for `weeks` weeks, `per_week` new units a week.

    Each look uses Welch's standard error and either z_{1-alpha/2} (fixed) or the anytime factor
    with rho tuned to the planned final size (readout.confseq), as the readout does.
    """
    rng = np.random.default_rng(seed)
    mv = mean_value()
    truth = (p_exposed - p_holdout) * mv
    acc = np.zeros((2, 3, tests))  # arm (0 holdout, 1 exposed) x (n, sum, sumsq) x test
    z = float(sps.norm.isf(alpha / 2))
    t_opt = weeks * per_week
    miss_any = np.zeros(tests, bool)
    miss_fixed = np.zeros(tests, bool)
    for _ in range(weeks):
        _one_week(rng, acc, per_week, holdout_share, p_holdout, p_exposed)
        n0, s0, q0 = acc[0]
        n1, s1, q1 = acc[1]
        m0, m1 = s0 / n0, s1 / n1
        v0 = (q0 - s0 * m0) / (n0 - 1) / n0
        v1 = (q1 - s1 * m1) / (n1 - 1) / n1
        se = np.sqrt(v0 + v1)
        diff = m1 - m0
        k = np.array([anytime_factor(float(t), t_opt=t_opt, alpha=alpha) for t in n0 + n1])
        miss_any |= np.abs(diff - truth) > k * se
        miss_fixed |= np.abs(diff - truth) > z * se
    last = np.abs(diff - truth) > z * se
    return Sequential(tests, weeks, t_opt, float(miss_any.mean()), float(miss_fixed.mean()), float(last.mean()))


@dataclass
class Coverage:
    """Share of simulated tests whose fixed-horizon interval covered the true difference."""

    tests: int
    units: int
    raw: float
    cuped: float
    mean_variance_reduction: float


def unit_level_test(rng: np.random.Generator, n: int, *, holdout_share: float = 0.5, p: float = 0.05,
                    lift: float = 0.1, rho: float = 0.6) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """One simulated test: arm (1 exposed), revenue, covariate; and the true difference per unit.

    Buyers: Bernoulli(p) in the holdout, p (1 + lift) in the exposed arm; a buyer's revenue is
    lognormal. The covariate is a pre-period revenue with correlation about `rho` on the log scale.
    """
    arm = (rng.random(n) >= holdout_share).astype(np.int8)
    latent = rng.standard_normal(n)
    pre = np.exp(VALUE[0] + VALUE[1] * latent) * (rng.random(n) < 3 * p)
    prob = np.where(arm == 1, p * (1 + lift), p) * (1 + 4.0 * (pre > 0))
    buy = rng.random(n) < prob
    noise = rho * latent + math.sqrt(1 - rho * rho) * rng.standard_normal(n)
    y = np.where(buy, np.exp(VALUE[0] + VALUE[1] * noise), 0.0)
    # the truth: E[Y | exposed] - E[Y | holdout], from the construction (P(pre > 0) = 3p)
    base = p * (1 + 4.0 * 3 * p)
    truth = base * lift * mean_value()
    return arm, y, pre, truth


def coverage(*, tests: int, units: int, alpha: float = 0.05, seed: int = 0) -> Coverage:
    """Fixed-horizon coverage of the raw (Welch) and CUPED intervals over simulated tests."""
    rng = np.random.default_rng(seed)
    hit_raw = hit_cuped = 0
    red = []
    for _ in range(tests):
        arm, y, x, truth = unit_level_test(rng, units)
        data = np.c_[y, x]
        a = Moments.of(("y", "x"), data[arm == 1])
        b = Moments.of(("y", "x"), data[arm == 0])
        r = welch(a, b, "y", alpha)
        c = cuped(a, b, "y", ["x"], alpha)
        hit_raw += r.lo <= truth <= r.hi
        hit_cuped += c.estimate.lo <= truth <= c.estimate.hi
        red.append(c.variance_reduction)
    return Coverage(tests, units, hit_raw / tests, hit_cuped / tests, float(np.mean(red)))


@dataclass
class FalsePays:
    """Share of simulated tests at exactly break-even that the decision rule ever called "pays"."""

    tests: int
    weeks: int
    units: int  # per test at the planned final look (both arms)
    rule: float  # anytime interval before the planned final look, fixed at it (the readout's rule)
    rule_no_floor: float  # the same without the floor of buyers
    fixed_weekly: float  # the fixed interval read at every look (what the rule prevents)
    fixed_once: float  # the fixed interval read once, at the planned final look


def false_pays(*, tests: int, weeks: int, per_week: int, p_holdout: float = 0.04, lift: float = 0.1,
               holdout_share: float = 0.1, alpha: float = 0.05, seed: int = 0, min_buyers: int = 0) -> FalsePays:
    """Simulate tests whose channel is exactly at break-even, read every week.

    The exposed arm's buyers buy at p_holdout (1 + lift) and spend is set so that the true iROAS
    equals break-even: "pays" at a look means the lower end of the look's interval lies above the
    true difference (iROAS is the difference times a positive constant, so the comparison is the
    same). The rule reads the anytime interval (readout.confseq, tuned to the planned size) at
    weeks 1 .. weeks-1 and the fixed-horizon Welch interval at the planned final week, as
    `readout.decision` does, and like it says nothing while an arm has fewer than `min_buyers`
    buyers (`readout.decision.MIN_BUYERS`); a test counts once, at its first "pays".
    """
    rng = np.random.default_rng(seed)
    mv = mean_value()
    p_exposed = p_holdout * (1 + lift)
    truth = (p_exposed - p_holdout) * mv
    acc = np.zeros((2, 3, tests))
    buyers_in = np.zeros((2, tests))
    z = float(sps.norm.isf(alpha / 2))
    t_opt = weeks * per_week
    rule = np.zeros(tests, bool)
    bare = np.zeros(tests, bool)
    weekly = np.zeros(tests, bool)
    once = np.zeros(tests, bool)
    for week in range(1, weeks + 1):
        for arm, buyers in enumerate(_one_week(rng, acc, per_week, holdout_share, p_holdout, p_exposed)):
            buyers_in[arm] += buyers
        n0, s0, q0 = acc[0]
        n1, s1, q1 = acc[1]
        m0, m1 = s0 / n0, s1 / n1
        se = np.sqrt((q0 - s0 * m0) / (n0 - 1) / n0 + (q1 - s1 * m1) / (n1 - 1) / n1)
        diff = m1 - m0
        judged = buyers_in.min(axis=0) >= min_buyers  # the rule's floor: below it, "not yet known"
        fixed_lo = diff - z * se
        weekly |= fixed_lo > truth
        if week < weeks:
            k = np.array([anytime_factor(float(t), t_opt=t_opt, alpha=alpha) for t in n0 + n1])
            rule |= judged & (diff - k * se > truth)
            bare |= diff - k * se > truth
        else:
            rule |= judged & (fixed_lo > truth)
            bare |= fixed_lo > truth
            once = fixed_lo > truth
    return FalsePays(tests, weeks, t_opt, float(rule.mean()), float(bare.mean()), float(weekly.mean()),
                     float(once.mean()))


@dataclass
class RelativeCoverage:
    """Share of simulated tests whose relative-lift interval covered the true relative lift."""

    tests: int
    units: int
    holdout_share: float
    raw: float
    cuped: float
    cuped_holdout_fixed: float  # the adjusted difference over the holdout mean taken as known


def relative_coverage(*, tests: int, units: int, holdout_share: float = 0.1, lift: float = 0.1,
                      alpha: float = 0.05, seed: int = 0) -> RelativeCoverage:
    """Coverage of the relative-lift intervals (delta method, raw and CUPED) over simulated tests
    (`unit_level_test`): the truth is `lift`, since buying probability scales by 1 + lift."""
    rng = np.random.default_rng(seed)
    hit = np.zeros(3)
    for _ in range(tests):
        arm, y, x, _truth = unit_level_test(rng, units, holdout_share=holdout_share, lift=lift)
        data = np.c_[y, x]
        a = Moments.of(("y", "x"), data[arm == 1])
        b = Moments.of(("y", "x"), data[arm == 0])
        r = relative_lift(a, b, "y", alpha)
        c = cuped(a, b, "y", ["x"], alpha)
        assert c.relative is not None
        mu = b.mean("y")
        old_lo, old_hi = c.estimate.lo / mu, c.estimate.hi / mu
        hit += [r.lo <= lift <= r.hi, c.relative.lo <= lift <= c.relative.hi, old_lo <= lift <= old_hi]
    raw, cu, old = hit / tests
    return RelativeCoverage(tests, units, holdout_share, float(raw), float(cu), float(old))
