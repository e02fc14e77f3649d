"""Pure statistics of the readout from moment sums: Welch, delta method, CUPED, Wald, anytime intervals.

Every function takes `Moments` (n, sums, cross-products per arm) and returns an `Estimate`; none
needs the raw rows. Conventions: arm `a` is the exposed arm, `b` the holdout; a difference is
a - b; intervals are two-sided at level 1 - alpha.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.shared.confseq import anytime_factor
from armlock.shared.readout_tables import Moments


@dataclass
class Estimate:
    """A point estimate, its standard error and two-sided interval; p against zero when it has one."""

    value: float
    se: float
    lo: float
    hi: float
    p: float | None = None
    df: float | None = None  # Welch-Satterthwaite degrees of freedom (t-based intervals)

    def as_dict(self) -> dict[str, float | None]:
        return {k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in asdict(self).items()}

    def scaled(self, k: float, shift: float = 0.0) -> Estimate:
        """k * estimate + shift (k > 0), e.g. incremental revenue from the per-unit difference."""
        return Estimate(k * self.value + shift, abs(k) * self.se, k * self.lo + shift, k * self.hi + shift,
                        self.p if shift == 0 else None, self.df)


NAN = float("nan")


def _normal(value: float, se: float, alpha: float) -> Estimate:
    from scipy import stats as sps
    if not (math.isfinite(value) and math.isfinite(se)) or se <= 0:
        return Estimate(value, se, NAN, NAN, None)
    z = float(sps.norm.isf(alpha / 2))
    p = float(2 * sps.norm.sf(abs(value) / se))
    return Estimate(value, se, value - z * se, value + z * se, p)


def welch_from_parts(diff: float, va: float, vb: float, na: int, nb: int, alpha: float) -> Estimate:
    """Welch's unequal-variance t for a difference with per-arm variances of the means va, vb."""
    from scipy import stats as sps
    se = math.sqrt(va + vb) if va + vb >= 0 else NAN
    if not (na >= 2 and nb >= 2 and se > 0 and math.isfinite(se)):
        return Estimate(diff, se, NAN, NAN, None)
    df = (va + vb) ** 2 / (va**2 / (na - 1) + vb**2 / (nb - 1))
    t = diff / se
    q = float(sps.t.isf(alpha / 2, df))
    return Estimate(diff, se, diff - q * se, diff + q * se, float(2 * sps.t.sf(abs(t), df)), df)


def welch(a: Moments, b: Moments, var: str, alpha: float = 0.05) -> Estimate:
    """Difference in means of `var` (a - b) with Welch's standard error, t, df and p.

    Equals scipy.stats.ttest_ind(equal_var=False) (statistic = value / se).
    """
    return welch_from_parts(a.mean(var) - b.mean(var), a.var(var) / a.n if a.n else NAN,
                            b.var(var) / b.n if b.n else NAN, a.n, b.n, alpha)


def mean_estimate(m: Moments, var: str, alpha: float = 0.05) -> Estimate:
    """One arm's mean with its standard error sqrt(s^2 / n) and a normal interval."""
    return _normal(m.mean(var), math.sqrt(m.var(var) / m.n) if m.n >= 2 else NAN, alpha)


# --- delta method (Deng, Knoblich & Lu 2018) ---------------------------------------------------

def ratio_var(m: Moments, num: str, den: str) -> float:
    """Delta-method variance of sum(num) / sum(den) over units (e.g. AOV = revenue / orders):
    Var(Y - R X) / (n mu_X^2) with R = mean(Y) / mean(X) and sample (ddof = 1) moments."""
    mx = m.mean(den)
    if m.n < 2 or mx == 0:
        return NAN
    r = m.mean(num) / mx
    v = m.var(num) - 2 * r * m.cov(num, den) + r * r * m.var(den)
    return v / (m.n * mx * mx)


def ratio_estimate(m: Moments, num: str, den: str, alpha: float = 0.05) -> Estimate:
    mx = m.mean(den)
    r = m.mean(num) / mx if mx else NAN
    v = ratio_var(m, num, den)
    return _normal(r, math.sqrt(v) if v >= 0 else NAN, alpha)


def ratio_diff(a: Moments, b: Moments, num: str, den: str, alpha: float = 0.05) -> Estimate:
    """Difference of two arms' ratio metrics (independent arms: the variances add)."""
    ra = a.mean(num) / a.mean(den) if a.mean(den) else NAN
    rb = b.mean(num) / b.mean(den) if b.mean(den) else NAN
    v = ratio_var(a, num, den) + ratio_var(b, num, den)
    return _normal(ra - rb, math.sqrt(v) if v >= 0 else NAN, alpha)


def relative_lift(a: Moments, b: Moments, var: str, alpha: float = 0.05) -> Estimate:
    """mean_a / mean_b - 1 with Var ~ Var(mean_a)/mu_b^2 + mu_a^2 Var(mean_b)/mu_b^4 (delta method)."""
    if a.n < 2 or b.n < 2:
        return Estimate(NAN, NAN, NAN, NAN)
    return ratio_lift(a.mean(var), b.mean(var), a.var(var) / a.n, b.var(var) / b.n, alpha)


# --- CUPED (Deng, Xu, Kohavi & Walker 2013, §3.2) ------------------------------------------------

@dataclass
class Cuped:
    """The adjusted difference, the pooled theta per covariate and the variance reduction achieved."""

    estimate: Estimate
    theta: list[float]
    variance_reduction: float  # 1 - Var(adjusted difference) / Var(raw difference)
    relative: Estimate | None = None  # adjusted mean_a / adjusted mean_b - 1 (delta method)


def ratio_lift(mu_a: float, mu_b: float, va: float, vb: float, alpha: float = 0.05) -> Estimate:
    """mu_a / mu_b - 1 for two independent means with variances va, vb (of the means), by the delta
    method for a ratio of means: Var ~ va / mu_b^2 + mu_a^2 vb / mu_b^4 (Deng, Knoblich & Lu 2018,
    "Applying the Delta Method in Metric Analytics", KDD, §3.3 percent change)."""
    if not mu_b or not (math.isfinite(va) and math.isfinite(vb)):
        return Estimate(NAN, NAN, NAN, NAN)
    v = va / mu_b**2 + mu_a**2 * vb / mu_b**4
    return _normal(mu_a / mu_b - 1, math.sqrt(v) if v >= 0 else NAN, alpha)


def pooled_theta(m: Moments, y: str, xs: list[str]) -> np.ndarray:
    """theta = Cov(X, X)^-1 Cov(X, Y) over the pooled units (one covariate: cov(Y, X) / var(X))."""
    sxx = np.array([[m.cov(p, q) for q in xs] for p in xs])
    sxy = np.array([m.cov(p, y) for p in xs])
    theta, *_ = np.linalg.lstsq(sxx, sxy, rcond=None)  # lstsq: a constant covariate gets theta 0
    return theta


def adjusted_var(m: Moments, y: str, xs: list[str], theta: np.ndarray) -> float:
    """Sample variance of Y - theta . X in one group, from its moments."""
    v = m.var(y)
    for i, p in enumerate(xs):
        v -= 2 * theta[i] * m.cov(p, y)
        for j, q in enumerate(xs):
            v += theta[i] * theta[j] * m.cov(p, q)
    return v


def cuped(a: Moments, b: Moments, y: str, xs: list[str], alpha: float = 0.05) -> Cuped:
    """CUPED difference a - b of `y` with covariates `xs` and one theta from the pooled sample.

    Y_cv = mean(Y) - theta (mean(X) - pooled mean(X)) in each arm; the same theta in both arms.
    """
    pooled = a + b
    theta = pooled_theta(pooled, y, xs)
    xbar = np.array([pooled.mean(x) for x in xs])

    def adj_mean(m: Moments) -> float:
        return m.mean(y) - float(theta @ (np.array([m.mean(x) for x in xs]) - xbar))

    va = adjusted_var(a, y, xs, theta) / a.n if a.n >= 2 else NAN
    vb = adjusted_var(b, y, xs, theta) / b.n if b.n >= 2 else NAN
    est = welch_from_parts(adj_mean(a) - adj_mean(b), va, vb, a.n, b.n, alpha)
    raw = a.var(y) / a.n + b.var(y) / b.n if a.n >= 2 and b.n >= 2 else NAN
    reduction = 1 - (va + vb) / raw if raw and math.isfinite(raw) and raw > 0 else NAN
    # relative lift of the adjusted means: both arms' uncertainty, the holdout's included
    rel = ratio_lift(adj_mean(a), adj_mean(b), va, vb, alpha)
    return Cuped(est, [float(t) for t in theta], reduction, rel)


# --- exposure: Wald / complier average causal effect (Angrist, Imbens & Rubin 1996) ------------

@dataclass
class Wald:
    """Effect per exposed unit: ITT on the outcome over ITT on exposure, with its delta-method SE."""

    estimate: Estimate
    itt_y: float
    itt_d: float
    exposure_a: float
    exposure_b: float


def wald(a: Moments, b: Moments, y: str, d: str = "exposed", alpha: float = 0.05) -> Wald:
    """ITT_Y / ITT_D; Var ~ V_Y/D^2 + Y^2 V_D/D^4 - 2 Y C/D^3 with the arms' variances and the
    within-arm covariance of outcome and exposure (two-sided non-compliance allowed)."""
    ea, eb = a.mean(d), b.mean(d)
    iy, idd = a.mean(y) - b.mean(y), ea - eb
    if a.n < 2 or b.n < 2 or idd == 0 or not math.isfinite(idd):
        return Wald(Estimate(NAN, NAN, NAN, NAN), iy, idd, ea, eb)
    vy = a.var(y) / a.n + b.var(y) / b.n
    vd = a.var(d) / a.n + b.var(d) / b.n
    c = a.cov(y, d) / a.n + b.cov(y, d) / b.n
    v = vy / idd**2 + iy**2 * vd / idd**4 - 2 * iy * c / idd**3
    return Wald(_normal(iy / idd, math.sqrt(v) if v >= 0 else NAN, alpha), iy, idd, ea, eb)


# --- anytime-valid interval -----------------------------------------------------------------------

def anytime(est: Estimate, units: int, *, t_opt: float, alpha: float = 0.05) -> tuple[float, float]:
    """The anytime-valid interval around an estimate whose standard error is est.se at `units` units
    (both arms together): est +/- se * factor (readout.confseq)."""
    if not (math.isfinite(est.se) and est.se > 0 and units > 0):
        return NAN, NAN
    h = est.se * anytime_factor(units, t_opt=t_opt, alpha=alpha)
    return est.value - h, est.value + h
