"""The readout's statistics against outside references: scipy, statsmodels, the papers' formulas."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats as sps

from armlock.readout.simulate import coverage
from armlock.readout.stats import (
    adjusted_var,
    cuped,
    mean_estimate,
    pooled_theta,
    ratio_diff,
    ratio_var,
    relative_lift,
    wald,
    welch,
)
from armlock.shared.readout_tables import Moments


def _arms(rng: np.random.Generator, n: int, cols: int = 1, shift: float = 0.0) -> tuple[Moments, Moments, np.ndarray, np.ndarray]:
    a = rng.lognormal(1, 1.2, size=(n, cols)) * (rng.random((n, 1)) < 0.3) + shift
    b = rng.lognormal(1, 1.2, size=(int(n * 0.37), cols)) * (rng.random((int(n * 0.37), 1)) < 0.3)
    names = tuple(f"v{i}" for i in range(cols))
    return Moments.of(names, a), Moments.of(names, b), a, b


@pytest.mark.parametrize("n", [10, 300, 50_000])
def test_welch_equals_scipy_ttest_ind(n: int) -> None:
    # scipy.stats.ttest_ind(equal_var=False): Welch's t and its Welch-Satterthwaite p.
    rng = np.random.default_rng(n)
    ma, mb, a, b = _arms(rng, n, shift=0.2)
    ours = welch(ma, mb, "v0")
    ref = sps.ttest_ind(a[:, 0], b[:, 0], equal_var=False)
    assert ours.value / ours.se == pytest.approx(ref.statistic, abs=1e-9)
    assert ours.p == pytest.approx(ref.pvalue, abs=1e-9)
    ci = ref.confidence_interval(0.95)
    assert (ours.lo, ours.hi) == pytest.approx((ci.low, ci.high), abs=1e-9)


def test_moments_add_up_like_the_whole() -> None:
    rng = np.random.default_rng(3)
    x = rng.normal(size=(1000, 3))
    names = ("a", "b", "c")
    whole = Moments.of(names, x)
    parts = Moments.of(names, x[:400]) + Moments.of(names, x[400:])
    assert parts.n == whole.n
    assert np.allclose(parts.m2, whole.m2) and np.allclose(parts.means, whole.means)
    assert parts.cov("a", "c") == pytest.approx(np.cov(x[:, 0], x[:, 2])[0, 1], rel=1e-9)


def test_large_mean_keeps_its_variance() -> None:
    # 1e9 + N(0, 1): raw sums of squares would lose every digit of the variance; central moments
    # merged pairwise (Chan, Golub & LeVeque 1979) give numpy's variance.
    rng = np.random.default_rng(4)
    x = 1e9 + rng.normal(size=20_000)
    m = Moments.of(("x",), x[:7_000]) + Moments.of(("x",), x[7_000:])
    assert m.var("x") == pytest.approx(np.var(x, ddof=1), rel=1e-9)


def test_delta_method_toy_vector() -> None:
    # REFERENCES §6a (derived from Deng, Knoblich & Lu 2018, "Applying the Delta Method in
    # Metric Analytics", KDD '18): revenue [10,0,25,5,40], orders [1,0,2,1,3] ->
    # AOV = 80/7, Var = 2.0564348 (ddof = 1).
    m = Moments.of(("revenue", "orders"), np.c_[[10, 0, 25, 5, 40], [1, 0, 2, 1, 3]])
    assert m.total("revenue") / m.total("orders") == pytest.approx(80 / 7, abs=1e-12)
    assert ratio_var(m, "revenue", "orders") == pytest.approx(2.0564348, abs=1e-7)


def test_delta_method_monte_carlo() -> None:
    # Deng, Knoblich & Lu 2018: the delta-method variance of a user-randomized ratio matches its
    # sampling variance (REFERENCES §6a reports 0.987 in a larger run). Small version: 400
    # replications of 4,000 users; AOV and the relative lift of revenue per user.
    rng = np.random.default_rng(7)
    reps, n = 400, 4_000
    aov, aov_var, lift, lift_var = [], [], [], []
    for _ in range(reps):
        o = rng.poisson(0.3, size=(2, n))
        rev = o * rng.lognormal(3.5, 1, size=(2, n))  # orders x one lognormal order value
        a = Moments.of(("revenue", "orders"), np.c_[rev[0] * 1.05, o[0]])
        b = Moments.of(("revenue", "orders"), np.c_[rev[1], o[1]])
        aov.append(a.total("revenue") / a.total("orders"))
        aov_var.append(ratio_var(a, "revenue", "orders"))
        r = relative_lift(a, b, "revenue")
        lift.append(r.value)
        lift_var.append(r.se**2)
    assert np.mean(aov_var) / np.var(aov, ddof=1) == pytest.approx(1.0, abs=0.15)
    assert np.mean(lift_var) / np.var(lift, ddof=1) == pytest.approx(1.0, abs=0.15)


def test_ratio_difference_uses_both_arms() -> None:
    rng = np.random.default_rng(2)
    o = rng.poisson(0.5, size=(2, 2000))
    rev = o * rng.lognormal(3, 1, size=(2, 2000))
    a = Moments.of(("r", "o"), np.c_[rev[0], o[0]])
    b = Moments.of(("r", "o"), np.c_[rev[1], o[1]])
    d = ratio_diff(a, b, "r", "o")
    assert d.se == pytest.approx(math.sqrt(ratio_var(a, "r", "o") + ratio_var(b, "r", "o")))


def _cuped_sample(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.gamma(0.5, 40, size=n)
    z = (rng.random(n) < 0.7).astype(float)
    y = 0.8 * x + rng.gamma(0.5, 30, size=n) + 3.0 * z
    return y, x, z


def test_cuped_hand_formula() -> None:
    # Deng, Xu, Kohavi & Walker 2013, §3.2 (REFERENCES §6b): theta = cov(Y, X) / var(X) from the
    # pooled sample; Y_cv = mean(Y) - theta (mean(X) - E X) in each arm with the same theta.
    y, x, z = _cuped_sample(20_000, 1)
    a = Moments.of(("y", "x"), np.c_[y, x][z == 1])
    b = Moments.of(("y", "x"), np.c_[y, x][z == 0])
    theta = np.cov(y, x)[0, 1] / np.var(x, ddof=1)
    hand = (y[z == 1].mean() - theta * (x[z == 1].mean() - x.mean())) - (
        y[z == 0].mean() - theta * (x[z == 0].mean() - x.mean()))
    c = cuped(a, b, "y", ["x"])
    assert c.theta[0] == pytest.approx(theta, rel=1e-10)
    assert c.estimate.value == pytest.approx(hand, rel=1e-10)
    raw = welch(a, b, "y")
    assert c.estimate.se < raw.se and c.variance_reduction > 0.3


def test_cuped_one_minus_rho_squared_identity() -> None:
    # Deng et al. 2013 §3.2: Var(Y - theta X) = Var(Y)(1 - rho^2) in-sample, theta = cov/var.
    y, x, _ = _cuped_sample(5_000, 2)
    m = Moments.of(("y", "x"), np.c_[y, x])
    theta = pooled_theta(m, "y", ["x"])
    rho = np.corrcoef(y, x)[0, 1]
    assert adjusted_var(m, "y", ["x"], theta) == pytest.approx(np.var(y, ddof=1) * (1 - rho**2), rel=1e-10)


def test_cuped_agrees_with_statsmodels_ols() -> None:
    # OLS of Y on [1, Z, X] (statsmodels) estimates the same adjusted difference. They differ
    # slightly: OLS's slope is the within-arm slope, CUPED's theta the pooled one (their gap is
    # the between-arm part of cov(X, Y), of order 1/n), and OLS's HC1 SE is a pooled-residual
    # sandwich against CUPED's per-arm variances. On 200,000 units: estimates within 0.5% of the
    # SE, standard errors within 1%.
    y, x, z = _cuped_sample(200_000, 3)
    a = Moments.of(("y", "x"), np.c_[y, x][z == 1])
    b = Moments.of(("y", "x"), np.c_[y, x][z == 0])
    c = cuped(a, b, "y", ["x"])
    fit = sm.OLS(y, sm.add_constant(np.c_[z, x])).fit(cov_type="HC1")
    assert abs(c.estimate.value - fit.params[1]) < 0.005 * c.estimate.se
    assert c.estimate.se == pytest.approx(fit.bse[1], rel=0.01)


def test_cuped_with_two_covariates_matches_multiple_regression_theta() -> None:
    rng = np.random.default_rng(5)
    x = rng.normal(size=(3000, 2))
    y = 1.5 * x[:, 0] - 0.7 * x[:, 1] + rng.normal(size=3000)
    m = Moments.of(("y", "x1", "x2"), np.c_[y, x])
    theta = pooled_theta(m, "y", ["x1", "x2"])
    ref = sm.OLS(y, sm.add_constant(x)).fit().params[1:]
    assert theta == pytest.approx(ref, rel=1e-9)


def test_wald_equals_two_stage_least_squares() -> None:
    # Angrist, Imbens & Rubin 1996 (REFERENCES §7): Wald = ITT_Y / ITT_D equals the 2SLS slope
    # of Y on D instrumented by Z; two stages by hand with statsmodels OLS. Two-sided
    # non-compliance: 60% of the exposed arm and 1.5% of the holdout were exposed.
    rng = np.random.default_rng(9)
    n = 200_000
    z = (rng.random(n) < 0.9).astype(float)
    d = np.where(z == 1, rng.random(n) < 0.6, rng.random(n) < 0.015).astype(float)
    y = rng.gamma(0.3, 20, size=n) * (1 + 0.05 * d)
    a = Moments.of(("y", "d"), np.c_[y, d][z == 1])
    b = Moments.of(("y", "d"), np.c_[y, d][z == 0])
    w = wald(a, b, "y", "d")
    first = sm.OLS(d, sm.add_constant(z)).fit()
    second = sm.OLS(y, sm.add_constant(first.fittedvalues)).fit()
    assert w.estimate.value == pytest.approx(second.params[1], abs=1e-9)
    # one-sided-like case: the delta SE is close to SE(ITT_Y) / ITT_D (REFERENCES §7)
    assert w.estimate.se == pytest.approx(welch(a, b, "y").se / w.itt_d, rel=0.05)


def test_wald_monte_carlo_se() -> None:
    # The delta-method SE of the Wald ratio matches its sampling spread (small Monte Carlo).
    rng = np.random.default_rng(4)
    vals, ses = [], []
    for _ in range(300):
        n = 6_000
        z = (rng.random(n) < 0.5).astype(float)
        d = np.where(z == 1, rng.random(n) < 0.5, rng.random(n) < 0.05).astype(float)
        y = rng.normal(10, 5, size=n) + 2.0 * d
        w = wald(Moments.of(("y", "d"), np.c_[y, d][z == 1]), Moments.of(("y", "d"), np.c_[y, d][z == 0]), "y", "d")
        vals.append(w.estimate.value)
        ses.append(w.estimate.se)
    assert np.mean(vals) == pytest.approx(2.0, abs=0.1)
    assert np.mean(ses) / np.std(vals, ddof=1) == pytest.approx(1.0, abs=0.15)


def test_coverage_of_fixed_intervals_raw_and_cuped() -> None:
    # Over 500 simulated holdout tests with a known effect, the 95% intervals cover it 93-97%.
    r = coverage(tests=500, units=4_000, seed=21)
    assert 0.93 <= r.raw <= 0.97
    assert 0.93 <= r.cuped <= 0.97
    assert r.mean_variance_reduction > 0


def test_mean_estimate_standard_error() -> None:
    x = np.array([1.0, 2.0, 4.0, 8.0])
    e = mean_estimate(Moments.of(("x",), x), "x")
    assert e.se == pytest.approx(sps.sem(x), rel=1e-12)
