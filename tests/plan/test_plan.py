"""The plan's own logic: dilution by reach, iROAS and break-even, revenue forgone, weeks needed, the advice."""

from __future__ import annotations

import math

import pytest

from armlock.assign import InputError
from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.shared.power import units_needed, z_sum

BASE = dict(weekly_units=50_000, revenue_mean=4.0, revenue_sd=30.0)
EQ = dict(BASE, equal_variance=True)  # the textbook formula, for identities that hold exactly there


def test_exposure_rate_dilutes_the_effect_the_arms_show() -> None:
    full = make_plan(PlanInputs(**EQ, effect=0.5), shares=[0.1], weeks=[8])
    half = make_plan(PlanInputs(**EQ, effect=0.5, exposure_rate=0.5), shares=[0.1], weeks=[8])
    assert half.target_difference == pytest.approx(0.25)
    assert full.target_difference == pytest.approx(0.5)
    # the detectable difference between arms does not depend on reach; per exposed unit it doubles
    assert half.cell(0.1, 8).mde == full.cell(0.1, 8).mde
    assert half.cell(0.1, 8).mde_per_exposed == pytest.approx(2 * full.cell(0.1, 8).mde_per_exposed)
    # halving the effect on the arms quadruples the units needed (n ~ 1 / effect^2)
    assert half.summaries[0].weeks_needed == pytest.approx(4 * full.summaries[0].weeks_needed)


def test_weeks_needed_is_the_closed_form_and_meets_the_target() -> None:
    p = make_plan(PlanInputs(**EQ, lift=0.04, exposure_rate=0.7), shares=[0.2], weeks=list(range(1, 80)),
                  max_weeks=80)
    target = 0.04 * 4.0 * 0.7
    s = p.summaries[0]
    assert s.weeks_needed == pytest.approx((z_sum(0.05, 0.8) * 30.0 / target) ** 2 * (1 / 0.2 + 1 / 0.8) / 50_000)
    assert p.cell(0.2, s.weeks).mde <= target < p.cell(0.2, s.weeks - 1).mde
    assert p.cell(0.2, s.weeks).power_at_target >= 0.8 > p.cell(0.2, s.weeks - 1).power_at_target


def test_iroas_is_incremental_revenue_over_the_whole_spend_as_the_readout_divides() -> None:
    # the readout: iROAS = difference x exposed units / the whole spend (readout/money.py, analyze.py); the plan
    # uses the same, so a --target-iroas needs a larger difference at a larger holdout share
    p = make_plan(PlanInputs(**BASE, target_iroas=3.0, weekly_spend=20_000, margin=0.4), shares=[0.05, 0.5], weeks=[6],
                  simulate=False)
    assert p.break_even_iroas == pytest.approx(2.5)
    for h in (0.05, 0.5):
        assert p.summary(h).target_difference == pytest.approx(3.0 * 20_000 / ((1 - h) * 50_000))
        c = p.cell(h, 6)
        assert c.iroas_vs_zero == pytest.approx(c.mde_cuped * c.exposed_units / (20_000 * 6))
        assert c.iroas_vs_break_even > 2.5 + 0.9 * c.iroas_vs_zero


def test_against_break_even_sizes_for_the_gap_above_break_even() -> None:
    kw = dict(BASE, target_iroas=4.0, weekly_spend=20_000, margin=0.4, equal_variance=True)
    zero = make_plan(PlanInputs(**kw), shares=[0.2], weeks=[6], simulate=False)
    pays = make_plan(PlanInputs(**kw, against="break-even"), shares=[0.2], weeks=[6], simulate=False)
    # units ~ 1 / gap^2: telling 4.0 from 2.5 needs (4 / 1.5)^2 the weeks of telling it from 0
    assert pays.summaries[0].weeks_needed / zero.summaries[0].weeks_needed == pytest.approx((4.0 / 1.5) ** 2, rel=1e-9)
    with pytest.raises(InputError, match="--against: break-even needs --margin"):
        PlanInputs(**BASE, lift=0.1, against="break-even")
    below = make_plan(PlanInputs(**dict(kw, target_iroas=2.0), against="break-even"), shares=[0.2], weeks=[6])
    assert below.recommendation.status == "fail" and "not above break-even" in below.recommendation.sentence
    rec = make_plan(PlanInputs(**kw, against="break-even"), max_weeks=52).recommendation.sentence
    assert "Against break-even (iROAS 2.50" in rec and "shows the channel pays when its iROAS is" in rec


def test_revenue_and_profit_forgone() -> None:
    p = make_plan(PlanInputs(**BASE, effect=0.3, exposure_rate=0.5, weekly_spend=10_000, margin=0.5),
                  shares=[0.1], weeks=[4])
    c = p.cell(0.1, 4)
    assert c.revenue_forgone == pytest.approx(0.15 * 0.1 * 50_000 * 4)  # arm difference x holdout units
    assert c.profit_forgone == pytest.approx(0.5 * c.revenue_forgone - 10_000 * 0.1 * 4)  # less the spend saved


def test_recommendation_weighs_time_against_money() -> None:
    x = PlanInputs(weekly_units=400_000, revenue_mean=7.0, revenue_sd=75.0, lift=0.05)
    plans = {k: make_plan(x, max_weeks=12, prefer=k) for k in ("money", "time", "balanced")}
    sound = [s for s in plans["money"].summaries if s.weeks is not None and s.weeks <= 12]
    cheapest = min(sound, key=lambda s: s.revenue_forgone)
    fastest = min(sound, key=lambda s: (s.weeks, s.revenue_forgone))
    assert plans["money"].recommendation.share == cheapest.share
    assert plans["time"].recommendation.share == fastest.share
    bal = plans["balanced"].recommendation
    chosen = plans["balanced"].summary(bal.share)
    assert chosen.revenue_forgone <= 1.25 * cheapest.revenue_forgone  # at most 25% more than the cheapest
    assert all(s.weeks >= chosen.weeks for s in sound if s.revenue_forgone <= 1.25 * cheapest.revenue_forgone)
    for rec in (r.recommendation for r in plans.values()):
        assert rec.status == "pass" and f"Hold out {rec.share * 100:g}%" in rec.sentence
    # the sentence shows the faster choices and what each costs extra
    assert "sooner and forgoes" in plans["money"].recommendation.sentence
    with pytest.raises(InputError, match="--prefer"):
        make_plan(x, prefer="cheap")


def test_recommendation_warn_fail_and_skipped() -> None:
    warn = make_plan(PlanInputs(weekly_units=150_000, revenue_mean=7.0, revenue_sd=75.0, lift=0.05), max_weeks=4)
    assert warn.recommendation.status == "warn" and warn.recommendation.share == 0.5
    assert warn.recommendation.weeks > 4
    fail = make_plan(PlanInputs(weekly_units=200, revenue_mean=7.0, revenue_sd=75.0, lift=0.05))
    assert fail.recommendation.status == "fail" and fail.recommendation.share is None
    assert "inconclusive" in fail.recommendation.sentence and "within 10 years" in fail.recommendation.sentence
    none = make_plan(PlanInputs(weekly_units=2_000, revenue_mean=7.0, revenue_sd=75.0))
    assert none.recommendation.status == "skipped" and none.summaries == []
    assert all(c.revenue_forgone is None for c in none.cells)


def test_whole_weeks_at_least_two() -> None:
    p = make_plan(PlanInputs(weekly_units=10_000_000, revenue_mean=7.0, revenue_sd=75.0, lift=0.2))
    assert p.summaries[0].weeks_needed < 1 and p.recommendation.weeks == 2


def test_weekly_reading_is_the_readouts_boundary_simulated() -> None:
    from armlock.plan import weekly
    from armlock.shared.confseq import anytime_factor

    p = make_plan(PlanInputs(**EQ, effect=0.4), shares=[0.2], weeks=[6], simulate=False)
    f = anytime_factor(123.0, t_opt=123.0, alpha=0.05)  # scale-free at t = t_opt
    assert p.anytime_factor == pytest.approx(f)
    c = p.cell(0.2, 6)
    d6 = weekly.drift_needed(6, 0.05, 0.8)
    assert c.mde_weekly_reading == pytest.approx(c.mde_cuped * d6 / 2.8015852, rel=1e-6)
    # weekly looks can stop early, so the drift needed lies between z_(1-a/2) + z_power (one look) and
    # the anytime factor at the end + z_power (the old bound, as if only the last look counted)
    assert 2.8015852 < d6 < f + 0.8416212
    s = p.summaries[0]
    assert 1.6 < s.weekly_factor < 1.9 < ((f + 0.8416212) / 2.8015852) ** 2  # not the 1.91 bound
    assert s.weeks_needed_weekly_reading == pytest.approx(s.weeks_needed * s.weekly_factor)


def test_weekly_boundary_keeps_its_level_and_one_look_is_the_normal_test() -> None:
    # Under no effect a path leaves the boundary upward with probability at most alpha / 2 (Howard et al. 2021:
    # the boundary holds at every look); with one look the readout's test is the fixed one at t = t_opt, whose
    # power at drift z_(1-a/2) + z_power is the planned power (normal CDF, stdlib NormalDist as the reference)
    from statistics import NormalDist

    from armlock.plan import weekly
    from armlock.shared.confseq import anytime_factor

    for looks in (4, 12, 26):
        assert weekly.power_weekly(0.0, looks, 0.05) <= 0.025
    f1 = anytime_factor(1.0, t_opt=1.0, alpha=0.05)
    assert weekly.power_weekly(f1 + 0.8416212, 1, 0.05) == pytest.approx(NormalDist().cdf(0.8416212), abs=0.012)


def test_from_conversion_revenue_moments() -> None:
    x = PlanInputs.from_conversion(conversion=0.02, order_value=80.0, order_value_sd=60.0, weekly_units=1000)
    assert x.revenue_mean == pytest.approx(1.6)
    assert x.revenue_sd ** 2 == pytest.approx(0.02 * (60 ** 2 + 80 ** 2) - 1.6 ** 2)
    c = make_plan(x, shares=[0.5], weeks=[2]).cell(0.5, 2)
    assert c.mde_conversion is not None and c.mde_conversion > 0


@pytest.mark.parametrize("kw,flag", [
    (dict(weekly_units=0), "--weekly-units"),
    (dict(revenue_sd=0), "--revenue-sd"),
    (dict(revenue_mean=-1), "--revenue-mean"),
    (dict(exposure_rate=0), "--exposure-rate"),
    (dict(exposure_rate=1.2), "--exposure-rate"),
    (dict(alpha=1.0), "--alpha"),
    (dict(power=0), "--power"),
    (dict(rho=1.0), "--rho"),
    (dict(effect=-0.1), "--effect"),
    (dict(effect=0.1, lift=0.1), "give one target"),
    (dict(target_iroas=2.0), "--weekly-spend"),
    (dict(margin=1.5), "--margin"),
    (dict(weekly_units=math.nan), "--weekly-units"),
])
def test_bad_numbers_are_input_errors_naming_the_option(kw: dict, flag: str) -> None:
    with pytest.raises(InputError, match=flag):
        PlanInputs(**{**BASE, **kw})


@pytest.mark.parametrize("shares,weeks,match", [
    ([0.0, 0.1], [4], "outside"), ([1.0], [4], "outside"), ([0.12345], [4], "basis points"),
    ([], [4], "at least one"), ([0.1], [0], "from 1 to 520"), ([0.1], [], "at least one"),
])
def test_bad_grid(shares: list[float], weeks: list[int], match: str) -> None:
    with pytest.raises(InputError, match=match):
        make_plan(PlanInputs(**BASE), shares=shares, weeks=weeks)


def test_json_form_is_versioned_and_complete() -> None:
    import json

    from armlock.plan.render import render_json

    p = make_plan(PlanInputs(**EQ, effect=0.3, weekly_spend=9_000, margin=0.3, rho=0.4), shares=[0.1, 0.3],
                  weeks=[2, 4])
    d = json.loads(render_json(p))
    assert d["schema"] == "armlock.plan/1"
    assert len(d["cells"]) == 4 and {c["share"] for c in d["cells"]} == {0.1, 0.3}
    assert d["recommendation"]["status"] in {"pass", "warn", "fail", "skipped"}
    assert d["target"]["difference_per_unit"] == pytest.approx(0.3)
    assert d["inputs"]["rho"] == 0.4 and d["cuped"] is True
    assert 1.6 < d["weekly_reading"]["weeks_factor"] < 1.9 and d["prefer"] == "balanced" and d["against"] == "zero"
    assert units_needed(0.3, 30.0 * math.sqrt(1 - 0.16), 0.1) / 50_000 == pytest.approx(d["by_share"][0]["weeks_needed"])


def test_exposed_arm_variance_grows_with_the_effect() -> None:
    # the default plan lets the exposed arm's variance grow as the ad brings more buyers (power.extra_variance):
    # it needs more weeks than the textbook formula, by about half the arm-level relative lift at equal split
    x = dict(BASE, lift=0.10, exposure_rate=0.8)
    eq = make_plan(PlanInputs(**x, equal_variance=True), shares=[0.5], weeks=[4])
    alt = make_plan(PlanInputs(**x), shares=[0.5], weeks=[4])
    ratio = alt.summaries[0].weeks_needed / eq.summaries[0].weeks_needed
    rel = 0.10 * 0.8  # arm-level relative lift
    assert 1 + 0.4 * rel < ratio < 1 + 0.6 * rel
    assert alt.cell(0.5, 4).mde > eq.cell(0.5, 4).mde
    assert alt.cell(0.5, 4).power_at_target < eq.cell(0.5, 4).power_at_target
    # and the weeks needed do meet the target under that variance
    s = alt.summaries[0]
    sized = make_plan(PlanInputs(**x), shares=[0.5], weeks=[s.weeks - 1, s.weeks])
    assert sized.cell(0.5, s.weeks).power_at_target >= 0.8 > sized.cell(0.5, s.weeks - 1).power_at_target


def test_extra_variance_is_the_variance_of_a_zero_inflated_basket() -> None:
    # exact moments of revenue = one basket (mean v, SD s) with probability p, before and after p rises
    from armlock.shared.power import extra_variance

    p, v, s, dp = 0.03, 60.0, 45.0, 0.004
    var = lambda q: q * (s ** 2 + v ** 2) - (q * v) ** 2  # noqa: E731
    mean, sd = p * v, math.sqrt(var(p))
    assert var(p) + extra_variance(dp * v, mean, sd) == pytest.approx(var(p + dp), rel=1e-12)


def test_public_names() -> None:
    import armlock.plan as plan

    assert sorted(plan.__all__) == plan.__all__
    for name in plan.__all__:
        assert getattr(plan, name) is not None
    # what the readout uses to state the power it had: the detectable effect and the power at its SE
    assert plan.mde(1.0) == pytest.approx(2.8015852, abs=1e-7)
    assert plan.power_at(plan.mde(0.5), 0.5) == pytest.approx(0.8, abs=1e-6)


def test_docstring_examples() -> None:
    import doctest

    import armlock.plan.compute
    import armlock.shared.power

    for mod in (armlock.plan.compute, armlock.shared.power):
        result = doctest.testmod(mod)
        assert result.attempted > 0 and result.failed == 0, mod.__name__


def test_a_small_skewed_holdout_gets_the_weeks_where_the_readouts_test_keeps_its_level() -> None:
    # 2,400 new units a week, revenue CV about 11: a 5% holdout at the normal arithmetic's weeks has a few
    # hundred holdout units, where Welch's test claims false wins about twice as often as alpha (simulated)
    x = PlanInputs(weekly_units=2_400, revenue_mean=7.0, revenue_sd=75.0, lift=1.5, exposure_rate=0.8)
    p = make_plan(x, shares=[0.05], max_weeks=60)
    s = p.summaries[0]
    assert s.weeks_normal is not None and s.false_win_rate_normal is not None and s.false_win_rate_normal > 0.07
    assert s.weeks is not None and s.weeks > 2 * s.weeks_normal and s.false_win_rate <= 0.06
    assert "would not do" in p.recommendation.sentence and "claims a false win" in p.recommendation.sentence
