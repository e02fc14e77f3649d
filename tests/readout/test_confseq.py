"""The anytime-valid interval: against the closed form of the papers, and by simulation of weekly looks."""

from __future__ import annotations

import math

import pytest
from scipy.optimize import minimize_scalar

from armlock.shared.confseq import anytime_factor, anytime_halfwidth, mixture_rho2
from armlock.readout.simulate import sequential_misses


def howard_boundary(v: float, r: float, alpha: float) -> float:
    """Two-sided normal-mixture boundary on |S_t| (Howard, Ramdas, McAuliffe & Sekhon 2021,
    "Time-uniform, nonparametric, nonasymptotic confidence sequences", Ann. Statist. 49(2)):
    sqrt((V + r) log((V + r) / (r alpha^2))), V = intrinsic time, r = mixture parameter."""
    return math.sqrt((v + r) * math.log((v + r) / (r * alpha * alpha)))


@pytest.mark.parametrize("t", [50, 1_000, 20_000, 1_000_000])
@pytest.mark.parametrize("sigma", [0.5, 75.0])
@pytest.mark.parametrize("alpha", [0.05, 0.01])
def test_halfwidth_is_the_mixture_boundary_divided_by_t(t: int, sigma: float, alpha: float) -> None:
    # S_t = t (mean - mu), V_t = t sigma^2, r = sigma^2 / rho^2 (Waudby-Smith et al. 2024's rho)
    t_opt = 20_000
    rho2 = mixture_rho2(t_opt, alpha)
    se = sigma / math.sqrt(t)
    ours = anytime_halfwidth(se, t, t_opt=t_opt, alpha=alpha)
    theirs = howard_boundary(t * sigma**2, sigma**2 / rho2, alpha) / t
    assert ours == pytest.approx(theirs, rel=1e-12)


def test_boundary_is_ville_level_of_the_mixture_martingale() -> None:
    # On the boundary the mixture martingale sqrt(r/(V+r)) exp(S^2 / (2 (V+r))) equals 1/alpha
    # (Ville's inequality then bounds the chance of ever crossing by alpha).
    v, r, alpha = 5_000.0, 300.0, 0.05
    s = howard_boundary(v, r, alpha)
    assert math.sqrt(r / (v + r)) * math.exp(s * s / (2 * (v + r))) == pytest.approx(1 / alpha, rel=1e-12)


@pytest.mark.parametrize("alpha", [0.05, 0.1, 0.01])
def test_rho_formula_is_near_the_numerical_optimum_at_t_opt(alpha: float) -> None:
    t_opt = 40_000.0

    def width(log_r2: float) -> float:
        tr = t_opt * math.exp(log_r2)
        return math.sqrt(2 * (tr + 1) / tr * math.log(math.sqrt(tr + 1) / alpha))

    best = minimize_scalar(width, bounds=(-25, 5), method="bounded", options={"xatol": 1e-9})
    assert anytime_factor(t_opt, t_opt=t_opt, alpha=alpha) <= best.fun * 1.001


def test_anytime_is_wider_than_fixed_everywhere() -> None:
    for t in (10, 1_000, 100_000, 10_000_000):
        assert anytime_factor(t, t_opt=100_000, alpha=0.05) > 1.96


def test_bad_arguments_are_refused() -> None:
    with pytest.raises(ValueError):
        anytime_factor(0, t_opt=10, alpha=0.05)
    with pytest.raises(ValueError):
        mixture_rho2(10, 1.5)


def test_weekly_looks_small_simulation() -> None:
    # The real test (REFERENCES §9): read at every weekly look, the anytime interval misses the
    # truth in at most alpha of tests; the fixed-horizon interval read weekly misses far more.
    # A smaller version of scripts/readout_calibration.py (figures in docs/readout-methods.md).
    r = sequential_misses(tests=400, weeks=26, per_week=400, seed=11)
    assert r.anytime_miss <= 0.05
    assert r.fixed_miss >= 0.15
    assert 0.02 <= r.fixed_last_miss <= 0.09  # one look at the end: about alpha
