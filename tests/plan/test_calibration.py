"""Closing the loop in the suite (small): simulated tests at the planned size reject as often as planned.

A direct simulation (armlock.plan.simulate: zero-inflated lognormal revenue, weekly cohorts, partial reach) —
the full-size version with 1,000+ tests per scenario is scripts/plan_calibration.py (figures in the README).
"""

from __future__ import annotations

import math

import pytest

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.power import extra_variance, units_needed_two_variances, z_sum
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
