"""Closing the loop in the suite (small): simulated tests at the planned size reject as often as planned.

A direct simulation (armlock.plan.simulate: zero-inflated lognormal revenue, weekly cohorts, partial reach) —
the full-size version with 1,000+ tests per scenario is scripts/plan_calibration.py (figures in docs/planner.md).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.shared.power import extra_variance, units_needed_two_variances, z_sum
from armlock.plan.simulate import simulate

WEEKS = 4


def _sized(sd: float, share: float, reach: float, lift: float, rho: float = 0.0) -> PlanInputs:
    diff, var = lift * 2.0 * reach, sd ** 2 * (1 - rho ** 2)  # sized by the planner's formula: 80% at WEEKS weeks
    var_e = var + extra_variance(diff, 2.0, sd)
    pooled = (var / share + var_e / (1 - share)) / (1 / share + 1 / (1 - share))  # Welch: one SE for both
    units = units_needed_two_variances(diff, pooled, var, var_e, share,
                                       z_crit=z_sum(0.05, 0.5), z_power=z_sum(0.05, 0.8) - z_sum(0.05, 0.5))
    return PlanInputs(weekly_units=units / WEEKS, revenue_mean=2.0, revenue_sd=sd, exposure_rate=reach, lift=lift,
                      rho=rho)


@pytest.mark.parametrize("sd,share,reach,lift", [(10.0, 0.2, 0.8, 0.10), (4.0, 0.5, 0.5, 0.30)])
def test_observed_power_matches_planned(sd: float, share: float, reach: float, lift: float) -> None:
    x = _sized(sd, share, reach, lift)
    c = make_plan(x, shares=[share], weeks=[WEEKS]).cell(share, WEEKS)
    assert c.power_at_target == pytest.approx(0.8, abs=1e-4)  # the far tail adds a hair
    sims = 600
    r = simulate(x, share, WEEKS, effect_per_exposed=lift * 2.0, sims=sims, seed=21)
    # 600 tests: binomial SE 1.6 points; 5 points is three SEs plus a little room for skewed revenue
    assert abs(r.fixed_end - c.power_at_target) <= 0.05, r
    # reading every week with the anytime-valid interval: at least the planned (conservative) power,
    # and below the fixed-horizon power, which is the price of looking weekly
    assert c.power_weekly_reading is not None
    assert c.power_weekly_reading - 0.05 <= r.anytime_any_week < r.fixed_end, r


def test_no_effect_rejects_at_alpha_and_peeking_does_not_stay_there() -> None:
    x = _sized(10.0, 0.2, 0.8, 0.10)
    sims = 800
    r = simulate(x, 0.2, WEEKS, effect_per_exposed=0.0, sims=sims, seed=22)
    se = math.sqrt(0.05 * 0.95 / sims)
    assert abs(r.fixed_end - 0.05) <= 3 * se, r  # fixed horizon read once: alpha
    assert r.anytime_any_week <= 0.05 + 2 * se, r  # anytime-valid read weekly: at most alpha
    assert r.fixed_any_week > r.fixed_end, r  # fixed-horizon read weekly: inflated


def test_cuped_power_matches_planned() -> None:
    x = _sized(6.0, 0.3, 0.8, 0.20, rho=0.5)
    c = make_plan(x, shares=[0.3], weeks=[WEEKS]).cell(0.3, WEEKS)
    sims = 500
    r = simulate(x, 0.3, WEEKS, effect_per_exposed=0.4, sims=sims, seed=23)
    assert r.cuped_end is not None
    # 500 unit-level tests (SE 1.8 points): three SEs and a little room; the script runs 1,000 at larger sizes
    assert abs(r.cuped_end - c.power_at_target) <= 0.06, r
    assert r.cuped_end > r.fixed_end, r  # the covariate buys power


def _welch_and_weekly(p_buy: float, mu: float, sigma: float, weekly: int, share: float, weeks: int, diff: float,
                      sims: int, seed: int) -> tuple[float, float]:
    """Independent of plan/soundness.py: weekly cohorts, every order value drawn, Welch's t from scipy at the end,
    the readout's anytime interval (readout.confseq) at every weekly look."""
    from scipy import stats

    from armlock.shared.confseq import anytime_factor

    rng = np.random.default_rng(seed)
    n_h = round(share * weekly)
    n_e = weekly - n_h
    q = (p_buy, p_buy + diff / math.exp(mu + sigma ** 2 / 2))
    acc = np.zeros((2, 2, sims))
    weekly_rej = np.zeros(sims, dtype=bool)
    for k in range(weeks):
        for arm, n in ((0, n_h), (1, n_e)):
            b = rng.binomial(n, q[arm], sims)
            vals = rng.lognormal(mu, sigma, int(b.sum()))
            who = np.repeat(np.arange(sims), b)
            acc[arm, 0] += np.bincount(who, vals, sims)
            acc[arm, 1] += np.bincount(who, vals * vals, sims)
        nh, ne = n_h * (k + 1), n_e * (k + 1)
        mh, me = acc[0, 0] / nh, acc[1, 0] / ne
        vh = (acc[0, 1] - acc[0, 0] * mh) / (nh - 1) / nh
        ve = (acc[1, 1] - acc[1, 0] * me) / (ne - 1) / ne
        se = np.sqrt(vh + ve)
        weekly_rej |= np.abs(me - mh) > anytime_factor(nh + ne, t_opt=weekly * weeks, alpha=0.05) * se
    df = (vh + ve) ** 2 / (vh ** 2 / (nh - 1) + ve ** 2 / (ne - 1))
    fixed = np.abs((me - mh) / se) > stats.t.isf(0.025, df)
    return float(fixed.mean()), float(weekly_rej.mean())


def test_recommended_design_of_a_small_skewed_shop_keeps_level_and_power() -> None:
    # the case: a small shop (2,400 new units a week, revenue CV about 11) with a big target and 8 weeks
    # allowed; the plan must recommend a design whose simulated Welch test has the power it states and alpha
    x = PlanInputs(weekly_units=2_400, revenue_mean=7.0, revenue_sd=75.0, lift=1.5, exposure_rate=0.8)
    p = make_plan(x, max_weeks=8)
    rec = p.recommendation
    assert rec.status == "pass" and rec.share is not None and rec.weeks is not None
    s = p.summary(rec.share)
    assert s.power_simulated is not None and s.false_win_rate is not None
    assert f"with {s.power_simulated * 100:.1f}% power (80% asked for)" in rec.sentence
    assert rec.power == s.power_simulated and rec.false_win_rate == s.false_win_rate
    small = p.summary(0.05)  # a 5% holdout would have been unsound at its normal-arithmetic weeks
    assert small.weeks is None or small.weeks > (small.weeks_normal or 0)
    sp = p.shape
    sims = 1500
    power, _ = _welch_and_weekly(sp[0], sp[1], sp[2], 2_400, rec.share, rec.weeks, s.target_difference, sims, 31)
    false, _ = _welch_and_weekly(sp[0], sp[1], sp[2], 2_400, rec.share, rec.weeks, 0.0, sims, 32)
    # 1,500 tests: SE about 1 point for power, 0.6 at 5%; the plan's figure and the observed one within 3.5 points
    assert abs(power - s.power_simulated) <= 0.035, (power, s.power_simulated)
    assert power >= 0.8 - 0.035 and false <= 0.05 + 0.01 + 0.015, (power, false)
