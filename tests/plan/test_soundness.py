"""The soundness simulation: Welch's t quantile, the fast arm sums against drawing every order value, and
the level of the readout's test on skewed revenue with a small holdout."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from armlock.plan import soundness
from armlock.plan.soundness import rejection_rate, shape_of, t_quantile


@pytest.mark.parametrize("df,tol", [(3, 1e-9), (10, 1e-9), (30, 1e-4), (60, 1e-5), (200, 1e-7)])
def test_t_quantile_matches_scipy(df: float, tol: float) -> None:
    # Abramowitz & Stegun 1964, 26.7.5 (from 30 df) against scipy.stats.t.isf (the reference implementation)
    for p in (0.025, 0.005):
        assert t_quantile(p, np.array([df]))[0] == pytest.approx(stats.t.isf(p, df), abs=tol)


def test_shape_keeps_the_mean_and_sd() -> None:
    # zero-inflated lognormal: mean = p E[V], E[Y^2] = p E[V^2] (exact moments of the lognormal)
    for mean, sd, conv, ov_sd in ((7.0, 75.0, None, None), (2.0, 10.0, 0.03, 40.0), (1.0, 1.0, None, None)):
        s = shape_of(mean, sd, conv, ov_sd)
        assert s.p * s.moment(1) == pytest.approx(mean, rel=1e-9)
        v = mean / s.p
        want = sd ** 2 if conv is None else conv * (ov_sd ** 2 + v ** 2) - mean ** 2  # known order values' SD
        assert s.p * s.moment(2) - (s.p * s.moment(1)) ** 2 == pytest.approx(want, rel=1e-6)


def test_fast_arm_sums_agree_with_drawing_every_order(monkeypatch: pytest.MonkeyPatch) -> None:
    s = shape_of(7.0, 75.0)
    fast = [rejection_rate(s, 20_000, 180_000, d, alpha=0.05, sims=1500, seed=5) for d in (0.0, 0.6)]
    monkeypatch.setattr(soundness, "EXACT_BUYERS", 10 ** 9)
    exact = [rejection_rate(s, 20_000, 180_000, d, alpha=0.05, sims=1500, seed=6) for d in (0.0, 0.6)]
    # two independent 1,500-test estimates: SE of the difference 0.8 points at 5%, 1.5 at 22%
    assert abs(fast[0] - exact[0]) < 0.025 and abs(fast[1] - exact[1]) < 0.045, (fast, exact)


def test_welch_keeps_its_level_on_mild_revenue_and_not_with_a_small_skewed_holdout() -> None:
    mild = shape_of(20.0, 25.0)  # half the units buy, order values CV about 0.6
    r = rejection_rate(mild, 5_000, 5_000, 0.0, alpha=0.05, sims=2000, seed=7)
    assert abs(r - 0.05) < 3 * np.sqrt(0.05 * 0.95 / 2000), r
    skewed = shape_of(7.0, 75.0)
    small = rejection_rate(skewed, 480, 9_120, 0.0, alpha=0.05, sims=2000, seed=8)
    assert small > 0.08, small  # about 11%: why small holdouts on skewed revenue are not recommended


def test_from_files_the_pre_periods_own_revenue_is_resampled() -> None:
    from armlock.plan import PlanInputs, make_plan

    rng = np.random.default_rng(12)
    y = np.where(rng.random(20_000) < 0.04, rng.pareto(2.5, 20_000) * 60 + 5, 0.0)  # a heavier tail than lognormal
    e = soundness.empirical(y)
    assert e is not None and e.p == pytest.approx(np.mean(y != 0))
    assert e.p * e.order_mean == pytest.approx(y.mean())  # the resampled mean is the data's
    tail, above, moments = e.split(0.01)
    assert moments[0] < e.order_mean < float(np.mean(above(rng, 1000)))
    x = PlanInputs(weekly_units=5_000, revenue_mean=float(y.mean()), revenue_sd=float(y.std(ddof=1)), lift=0.3)
    p = make_plan(x, shares=[0.2], weeks=[4], revenue_sample=y)
    assert p.resampled and "resampled" in p.recommendation.sentence
    s = p.summaries[0]
    assert s.false_win_rate is not None and s.false_win_rate <= 0.06
