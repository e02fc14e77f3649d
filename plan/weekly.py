"""What reading every week costs, from the readout's own anytime boundary (readout.confseq), by simulation.

The readout reads a test at weekly looks k = 1..K with the interval est +/- se_k * anytime_factor(t_k,
t_opt) (`armlock.shared.confseq`, the one function both use), tuned to the planned size (t_opt = the units
at the planned end). In units of the standard error at the end, the estimate at look k is B(t_k) + delta t_k
with B a standard Brownian motion and t_k = k / K (equal weekly cohorts); the interval excludes zero upward
when B(t_k) + delta t_k > f_k sqrt(t_k). So a path first crosses at the smallest drift
    m = min_k (f_k sqrt(t_k) - B(t_k)) / t_k,
and the power of weekly reading at drift delta is P(m < delta): the drift needed for power 1 - beta is the
(1 - beta) quantile of m over simulated paths. Reading once at the end needs z_(1-alpha/2) + z_(1-beta); the
ratio of the two, squared, is how many more units (weeks) weekly reading needs. The lower crossing is
left out (at the planned power its probability is below 1e-6). Seeded, vectorised: a few thousand paths.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from armlock.shared.confseq import anytime_factor

from armlock.shared.power import N01

PATHS = 8000  # simulated paths per number of looks: the quantile's Monte Carlo error is about 0.5%
MAX_LOOKS = 104  # beyond two years of weekly looks the boundary is used with 104 looks (fewer looks: less power,
# so the figure errs on the safe side)


def _first_crossing_drift(looks: int, alpha: float) -> np.ndarray:
    """Sorted drifts (in end standard errors) at which each simulated path first leaves the anytime boundary."""
    return _crossings(min(max(int(looks), 1), MAX_LOOKS), alpha)


@lru_cache(maxsize=256)
def _crossings(k: int, alpha: float, paths: int = PATHS, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(np.random.SeedSequence([seed, k]))
    t = np.arange(1, k + 1) / k
    f = np.array([anytime_factor(tk, t_opt=1.0, alpha=alpha) for tk in t])  # scale-free: only t / t_opt matters
    b = np.cumsum(rng.standard_normal((paths, k)), axis=1) / np.sqrt(k)
    m = ((f * np.sqrt(t) - b) / t).min(axis=1)
    m.sort()
    return m


def drift_needed(looks: int, alpha: float, power: float) -> float:
    """Drift (true difference / end SE) at which weekly reading with `looks` looks rejects with `power`."""
    m = _first_crossing_drift(looks, alpha)
    return float(np.quantile(m, power))


def power_weekly(drift: float, looks: int, alpha: float) -> float:
    """Power of reading every week with the anytime interval when the true difference is `drift` end SEs."""
    m = _first_crossing_drift(looks, alpha)
    return float(np.searchsorted(m, drift, side="right") / len(m))


def units_factor(looks: int, alpha: float, power: float) -> float:
    """How many times the units (weeks) of a read-once test the same power needs when read every week."""
    fixed = -N01.inv_cdf(alpha / 2) + N01.inv_cdf(power)
    return (drift_needed(looks, alpha, power) / fixed) ** 2


def weeks_read_weekly(weeks_once: float, alpha: float, power: float) -> tuple[float, float]:
    """Weeks a test read every week needs, given the weeks it needs read once: (weeks, factor). The number of
    looks is itself those weeks, so the two are solved together (a few rounds settle it)."""
    factor = units_factor(max(2, round(weeks_once * 1.8)), alpha, power)
    for _ in range(6):
        looks = max(1, int(np.ceil(weeks_once * factor - 1e-9)))
        new = units_factor(looks, alpha, power)
        if abs(new - factor) < 1e-9:
            break
        factor = new
    return weeks_once * factor, factor
