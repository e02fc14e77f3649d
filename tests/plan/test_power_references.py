"""The planner's power arithmetic against published formulas, statsmodels and worked examples (REFERENCES §5, §6b, §7)."""

from __future__ import annotations

import math

import pytest
from scipy.stats import norm
from statsmodels.stats.power import NormalIndPower, TTestIndPower
from statsmodels.stats.proportion import proportion_effectsize

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.shared.power import conversion_mde, mde, power_at, se_difference, units_needed, z_sum


def power_prop_test_n(p1: float, p2: float, alpha: float = 0.05, power: float = 0.8) -> float:
    """R's power.prop.test (strict = FALSE) per-group n, the Fleiss formula as printed in REFERENCES §5:
    n = [z_{1-a/2} sqrt(2 pbar(1-pbar)) + z_{1-b} sqrt(p1(1-p1) + p2(1-p2))]^2 / (p1 - p2)^2."""
    pbar = (p1 + p2) / 2
    za, zb = norm.isf(alpha / 2), norm.ppf(power)
    return float((za * math.sqrt(2 * pbar * (1 - pbar)) + zb * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))) ** 2
                 / (p1 - p2) ** 2)


def power_prop_test_power(n: float, p1: float, p2: float, alpha: float = 0.05) -> float:
    """R's power.prop.test power for n per group (strict = FALSE): the same formula solved for power."""
    pbar = (p1 + p2) / 2
    za = norm.isf(alpha / 2)
    q = math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))
    return float(norm.cdf((math.sqrt(n) * abs(p1 - p2) - za * math.sqrt(2 * pbar * (1 - pbar))) / q))


# --- statsmodels (REFERENCES §5: NormalIndPower / TTestIndPower, docs read, outputs verified) -------------

def test_normal_two_sample_n_matches_statsmodels_normalindpower() -> None:
    # statsmodels NormalIndPower().solve_power(0.5, alpha=0.05, power=0.8) = 62.790884 per group; the closed
    # form gives 62.791038 because statsmodels also counts the far tail (REFERENCES §5: rel. tol ~1e-5)
    ours = units_needed(0.5, 1.0, 0.5) / 2
    assert ours == pytest.approx(62.791038, rel=1e-6)
    sm = NormalIndPower().solve_power(effect_size=0.5, alpha=0.05, power=0.8)
    assert ours == pytest.approx(sm, rel=1e-5)


@pytest.mark.parametrize("share", [0.05, 0.1, 0.2, 0.3])
def test_unequal_split_matches_statsmodels_ratio(share: float) -> None:
    # statsmodels NormalIndPower with ratio = nobs2 / nobs1: nobs1 is the holdout (small arm)
    d = 0.03
    sm_small = NormalIndPower().solve_power(effect_size=d, alpha=0.05, power=0.8, ratio=(1 - share) / share)
    assert units_needed(d, 1.0, share) * share == pytest.approx(sm_small, rel=1e-5)


@pytest.mark.parametrize("n_small,ratio,d", [(5_000, 9.0, 0.05), (60, 1.0, 0.5), (200_000, 1.0, 0.01)])
def test_power_at_matches_statsmodels_power(n_small: float, ratio: float, d: float) -> None:
    # NormalIndPower().power counts both rejection tails, as power_at does: equal to rounding
    se = se_difference(1.0, n_small, n_small * ratio)
    sm = NormalIndPower().power(effect_size=d, nobs1=n_small, alpha=0.05, ratio=ratio)
    assert power_at(d, se, alpha=0.05) == pytest.approx(sm, abs=1e-9)


def test_normal_mde_agrees_with_ttest_at_planning_sizes() -> None:
    # statsmodels TTestIndPower (exact noncentral t): at the sizes a holdout test has (thousands of units
    # per arm) the normal approximation the planner uses is within 0.01% of the t-test's effect size
    for n_small, ratio in ((10_000, 9.0), (50_000, 1.0), (2_000, 4.0)):
        d_t = TTestIndPower().solve_power(nobs1=n_small, alpha=0.05, power=0.8, ratio=ratio)
        d_z = mde(se_difference(1.0, n_small, n_small * ratio))
        assert d_z == pytest.approx(d_t, rel=1e-4)


def test_ttest_reference_value_and_where_normal_is_not_enough() -> None:
    # REFERENCES §5: TTestIndPower().solve_power(1, alpha=.05, power=.9) = 22.021088 (R power.t.test 22.02110).
    # At such a tiny size the normal approximation asks for about one unit fewer per arm: the planner warns
    # below 1,000 units per arm instead of pretending.
    assert TTestIndPower().solve_power(1.0, alpha=0.05, power=0.9) == pytest.approx(22.021088, rel=1e-6)
    assert units_needed(1.0, 1.0, 0.5, power=0.9) / 2 == pytest.approx(21.0148, rel=1e-4)
    # The planner does not stop at the normal arithmetic: each share's design is simulated as the readout reads
    # it (Welch's t at its own degrees of freedom), and kept only with its level and power (plan/soundness.py).
    plan = make_plan(PlanInputs(weekly_units=40, revenue_mean=1.0, revenue_sd=1.0, effect=1.0), shares=[0.5])
    s = plan.summaries[0]
    assert s.weeks is not None and s.weeks_normal is not None and s.weeks >= s.weeks_normal
    assert s.false_win_rate is not None and s.false_win_rate <= 0.06
    assert s.power_simulated is not None and s.power_simulated >= 0.79


# --- proportions: R power.prop.test formula and Cohen's h (REFERENCES §5) --------------------------------

def test_r_power_prop_test_reference_values() -> None:
    # R power.prop.test(p1=.50, p2=.75, power=.90): n = 76.7 per group; power.prop.test(n=50, ...) = 0.7401659
    # (REFERENCES §5; the R outputs are from memory there, the formula is the documented one)
    assert power_prop_test_n(0.5, 0.75, power=0.9) == pytest.approx(76.7069, abs=1e-4)
    assert power_prop_test_power(50, 0.5, 0.75) == pytest.approx(0.7401659, abs=1e-7)


def test_worked_example_two_to_two_point_two_percent() -> None:
    # REFERENCES §5 worked example (DERIVED two ways): 2.0% -> 2.2%, alpha .05, power .8 needs 80,681.4 per
    # arm by Fleiss / power.prop.test. The planner's conversion MDE (arcsine scale) at that size is +0.2 points
    # to within 0.1% (arcsine and Fleiss differ by 0.05% in n: 80,637.2 vs 80,681.4).
    n = power_prop_test_n(0.02, 0.022)
    assert n == pytest.approx(80_681.4, abs=0.1)
    assert conversion_mde(0.02, n, n) == pytest.approx(0.002, rel=1e-3)
    # Cohen's h with NormalIndPower: 80,637.2 per arm; the planner's arcsine MDE inverts it exactly
    h = proportion_effectsize(0.022, 0.02)
    n_h = NormalIndPower().solve_power(effect_size=h, alpha=0.05, power=0.8)
    assert n_h == pytest.approx(80_637.2, abs=0.1)
    assert conversion_mde(0.02, n_h, n_h) == pytest.approx(0.002, rel=1e-5)


def test_worked_example_ninety_ten_small_arm() -> None:
    # REFERENCES §5: a 90/10 holdout (ratio=9, h-based) needs 44,798.5 units in the small arm, ~448k in total
    h = proportion_effectsize(0.022, 0.02)
    n_small = NormalIndPower().solve_power(effect_size=h, alpha=0.05, power=0.8, ratio=9)
    assert n_small == pytest.approx(44_798.5, abs=0.1)
    assert conversion_mde(0.02, 44_798.5, 9 * 44_798.5) == pytest.approx(0.002, rel=1e-5)
    assert 10 * n_small == pytest.approx(448_000, rel=0.001)


def test_two_variance_machinery_reproduces_r_power_prop_test() -> None:
    # R power.prop.test (Fleiss, REFERENCES §5): critical value on the pooled variance, spread on each arm's own.
    # The planner's general functions give R's n and power when fed those variances.
    from armlock.shared.power import power_two_variances, units_needed_two_variances

    p1, p2 = 0.02, 0.022
    pbar = (p1 + p2) / 2
    za = z_sum(0.05, 0.5)
    n = units_needed_two_variances(p2 - p1, pbar * (1 - pbar), p1 * (1 - p1), p2 * (1 - p2), 0.5,
                                   z_crit=za, z_power=z_sum(0.05, 0.8) - za) / 2
    assert n == pytest.approx(power_prop_test_n(p1, p2), rel=1e-12)
    assert n == pytest.approx(80_681.4, abs=0.1)
    se0 = math.sqrt(2 * 0.625 * 0.375 / 50)
    se1 = math.sqrt((0.5 * 0.5 + 0.75 * 0.25) / 50)
    # plus the far rejection tail (1.3e-6 here), which R leaves out with strict = FALSE
    assert power_two_variances(0.25, se0, se1, z_crit=za) == pytest.approx(0.7401659, abs=2e-6)
    # with a 0/1 "revenue" (basket 1, no spread) the planner's exposed-arm variance is exactly p2(1 - p2)
    from armlock.shared.power import extra_variance

    assert p1 * (1 - p1) + extra_variance(p2 - p1, p1, math.sqrt(p1 * (1 - p1))) == pytest.approx(p2 * (1 - p2))


def test_lehr_sixteen_s_squared_over_d_squared() -> None:
    # Lehr (1992), Stat Med 11(8): n ~ 16 s^2 / d^2 per group at alpha .05, power .8 (REFERENCES §5, MEMORY).
    # Exact normal: 2 (1.95996 + 0.84162)^2 = 15.6978.
    for s, d in ((1.0, 0.1), (75.0, 0.35), (3.0, 0.02)):
        per_arm = units_needed(d, s, 0.5) / 2
        assert per_arm * d ** 2 / s ** 2 == pytest.approx(15.6978, abs=1e-4)
        assert per_arm == pytest.approx(16 * s ** 2 / d ** 2, rel=0.02)
    assert 2 * z_sum(0.05, 0.8) ** 2 == pytest.approx(15.6978, abs=1e-4)


# --- Lewis & Rao (2015) stylized numbers (REFERENCES §7, SECONDARY via Salganik 2018, Bit by Bit, Ch. 4) ----

def test_lewis_rao_sales_lift_needs_720815_per_arm() -> None:
    # mean sales $7, SD $75, lift $0.35 per customer: 720,815 per arm (alpha .05 two-sided, power .8)
    assert round(units_needed(0.35, 75.0, 0.5) / 2) == 720_815
    plan = make_plan(PlanInputs(weekly_units=1_441_630, revenue_mean=7.0, revenue_sd=75.0, effect=0.35,
                                equal_variance=True), shares=[0.5], weeks=[1])
    assert plan.summaries[0].weeks_needed == pytest.approx(1.0, rel=1e-5)
    assert plan.cell(0.5, 1).power_at_target == pytest.approx(0.8, abs=1e-4)


def test_lewis_rao_roi_to_25_points_needs_18_million_per_arm() -> None:
    # cost $0.14 per customer, margin 50%: ROI = margin x iROAS - 1, so +/-25 ROI points = +/-0.5 iROAS =
    # a $0.07 sales difference, which needs about 18.0 million per arm
    per_arm = units_needed(0.07, 75.0, 0.5) / 2
    assert per_arm == pytest.approx(18.0e6, rel=0.005)
    # four weeks of traffic, $0.14 spend per exposed customer; the spend is the whole spend, all of it on the
    # exposed half (the readout's convention: iROAS = incremental revenue / the whole spend)
    weekly = 2 * per_arm / 4
    plan = make_plan(PlanInputs(weekly_units=weekly, revenue_mean=7.0, revenue_sd=75.0, weekly_spend=0.14 * weekly / 2,
                                margin=0.5, equal_variance=True), shares=[0.5], weeks=[4])
    c = plan.cell(0.5, 4)
    assert c.iroas_vs_zero == pytest.approx(0.5, rel=1e-9)  # iROAS resolution 0.5 -> ROI 25 points
    assert (c.iroas_vs_break_even - plan.break_even_iroas) * 0.5 * 100 == pytest.approx(25.0, rel=1e-9)


def test_lewis_rao_roi_interval_at_100k_per_arm() -> None:
    # with 100k per arm the 95% interval on ROI is about +/-235 percentage points
    half = norm.isf(0.025) * se_difference(75.0, 100_000, 100_000)
    assert half / 0.14 * 0.5 * 100 == pytest.approx(235, abs=0.5)


# --- CUPED (REFERENCES §6b: Deng, Xu, Kohavi & Walker 2013, Var(delta_cv) = Var(delta)(1 - rho^2)) ---------

@pytest.mark.parametrize("rho", [0.3, -0.5, 0.8])
def test_cuped_shrinks_variance_by_one_minus_rho_squared(rho: float) -> None:
    base = PlanInputs(weekly_units=30_000, revenue_mean=5.0, revenue_sd=40.0, effect=0.5, equal_variance=True)
    raw = make_plan(base, shares=[0.1], weeks=[6])
    adj = make_plan(PlanInputs(**{**base.__dict__, "rho": rho}), shares=[0.1], weeks=[6])
    c0, c1 = raw.cell(0.1, 6), adj.cell(0.1, 6)
    assert (c1.mde_cuped / c0.mde) ** 2 == pytest.approx(1 - rho ** 2, rel=1e-12)
    assert c1.mde == pytest.approx(c0.mde, rel=1e-12)  # "without CUPED" is unchanged
    assert adj.summaries[0].weeks_needed / raw.summaries[0].weeks_needed == pytest.approx(1 - rho ** 2, rel=1e-12)


def test_cuped_variance_ratio_in_simulation() -> None:
    # the in-sample identity of §6b: with theta = cov(Y, X) / var(X) the adjusted outcome's variance is
    # var(Y)(1 - r^2) where r is the sample correlation (REFERENCES §6b, verified there by simulation)
    import numpy as np

    rng = np.random.default_rng(7)
    x = rng.gamma(0.3, 20.0, 20_000)
    y = 0.6 * x + rng.gamma(0.3, 25.0, 20_000)
    r = np.corrcoef(x, y)[0, 1]
    theta = np.cov(x, y)[0, 1] / np.var(x, ddof=1)
    assert np.var(y - theta * x, ddof=1) / np.var(y, ddof=1) == pytest.approx(1 - r ** 2, rel=1e-9)
