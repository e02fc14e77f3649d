"""Closing the loop: simulate many holdout tests at a planned size and count how often each reading rejects.

The data-generating process is a zero-inflated lognormal revenue per unit (a share `conversion` of units buy
once, by default the share at which order values have a coefficient of variation of 1, order values lognormal with the planned mean and SD), new units arriving in equal weekly cohorts, and
reached units of the exposed arm (Binomial(exposure rate)) buying with a raised conversion so that their mean
revenue rises by the planned effect per exposed unit. Each test is read with Welch's z-test on the
difference of arm means (fixed horizon, at the end and at every weekly look) and with the anytime-valid
interval at every weekly look. With `rho`, a pre-period covariate correlated rho with revenue is drawn per
unit and the CUPED-adjusted difference (one pooled theta) is read too.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from armlock.shared.power import N01 as _N

from armlock.shared.confseq import anytime_factor

from .model import PlanInputs


@dataclass(frozen=True)
class SimResult:
    """Share of simulated tests that rejected 'no difference', by way of reading."""

    sims: int
    fixed_end: float  # fixed-horizon test, read once at the planned end
    fixed_any_week: float  # fixed-horizon test read every week (peeking): inflated
    anytime_any_week: float  # anytime-valid interval read every week
    cuped_end: float | None  # CUPED-adjusted fixed-horizon test at the end (only with rho)


def _order_values(p: float, mean: float, sd: float) -> tuple[float, float]:
    """Lognormal (mu, sigma) of one order value so that revenue per unit has the given mean and SD at conversion p."""
    v = mean / p
    s2 = (sd ** 2 + mean ** 2) / p - v ** 2
    if s2 <= 0:
        raise ValueError(f"conversion {p} is too high for mean {mean} and SD {sd}")
    sigma2 = math.log(1 + s2 / v ** 2)
    return math.log(v) - sigma2 / 2, math.sqrt(sigma2)


def simulate(inputs: PlanInputs, share: float, weeks: int, *, effect_per_exposed: float, sims: int = 1000,
             seed: int = 0, conversion: float | None = None) -> SimResult:
    """Simulate `sims` tests of `weeks` weeks with `share` held out; see the module docstring for the model."""
    x = inputs
    rng = np.random.default_rng(seed)
    # without a conversion rate: the one at which order values have a coefficient of variation of 1
    # (a modelling choice: p (s^2 + v^2) = sd^2 + mean^2 with s = v gives p = 2 mean^2 / (sd^2 + mean^2))
    p = conversion or x.conversion or min(0.5, 2 * x.revenue_mean ** 2 / (x.revenue_sd ** 2 + x.revenue_mean ** 2))
    mu_l, sg_l = _order_values(p, x.revenue_mean, x.revenue_sd)
    v = x.revenue_mean / p
    p_reached = p + effect_per_exposed / v  # reached units buy more often; order values unchanged
    if not 0 <= p_reached <= 1:
        raise ValueError(f"effect {effect_per_exposed} is not reachable by a change of conversion from {p}")
    W = x.weekly_units
    n_h_w, n_e_w = int(round(share * W)), int(round((1 - share) * W))
    z = float(-_N.inv_cdf(x.alpha / 2))
    t_opt = (n_h_w + n_e_w) * weeks
    f_looks = np.array([anytime_factor((n_h_w + n_e_w) * (k + 1), t_opt=t_opt, alpha=x.alpha) for k in range(weeks)])
    cuped = x.rho != 0
    rej_end = rej_peek = rej_any = rej_cuped = 0
    for _ in range(sims):
        if cuped:
            out = _one_test_units(rng, n_h_w * weeks, n_e_w * weeks, p, p_reached, x.exposure_rate, mu_l, sg_l,
                                  x.revenue_sd, x.rho)
            d, se, d_cv, se_cv = out
            rej_end += abs(d) > z * se
            rej_cuped += abs(d_cv) > z * se_cv
            continue
        sums = np.zeros((2, 3))  # per arm: units, sum, sum of squares (cumulative over weekly cohorts)
        peek = anytime = False
        for k in range(weeks):
            for arm, n in ((0, n_h_w), (1, n_e_w)):
                if arm == 1:
                    m = rng.binomial(n, x.exposure_rate)
                    buyers = rng.binomial(m, p_reached) + rng.binomial(n - m, p)
                else:
                    buyers = rng.binomial(n, p)
                vals = rng.lognormal(mu_l, sg_l, buyers)
                sums[arm] += (n, vals.sum(), (vals ** 2).sum())
            means = sums[:, 1] / sums[:, 0]
            var = (sums[:, 2] - sums[:, 0] * means ** 2) / (sums[:, 0] - 1)
            d = means[1] - means[0]
            se = math.sqrt(var[0] / sums[0, 0] + var[1] / sums[1, 0])
            peek = peek or abs(d) > z * se
            anytime = anytime or abs(d) > f_looks[k] * se
        rej_end += abs(d) > z * se
        rej_peek += peek
        rej_any += anytime
    return SimResult(sims=sims, fixed_end=rej_end / sims, fixed_any_week=math.nan if cuped else rej_peek / sims,
                     anytime_any_week=math.nan if cuped else rej_any / sims,
                     cuped_end=rej_cuped / sims if cuped else None)


def _one_test_units(rng: np.random.Generator, n_h: int, n_e: int, p: float, p_reached: float, e: float,
                    mu_l: float, sg_l: float, sd: float, rho: float) -> tuple[float, float, float, float]:
    """One test drawn unit by unit (needed for a per-unit covariate): raw and CUPED differences with SEs."""
    n = n_h + n_e
    exposed = np.zeros(n, dtype=bool)
    exposed[n_h:] = True
    reached = exposed & (rng.random(n) < e)
    u = rng.random(n)
    base_buy = u < p  # baseline: the same units buy with or without the ad...
    buy = base_buy | (reached & (u < p_reached))  # ...and reached units buy a little more often
    y_base = np.where(base_buy, rng.lognormal(mu_l, sg_l, n), 0.0)
    y = np.where(buy & ~base_buy, rng.lognormal(mu_l, sg_l, n), y_base)
    # covariate: baseline revenue plus independent noise, so corr(covariate, baseline revenue) = rho
    cov = y_base + rng.normal(0.0, sd * math.sqrt(1 / rho ** 2 - 1), n)
    theta = np.cov(cov, y)[0, 1] / np.var(cov, ddof=1)  # pooled over both arms (Deng et al. 2013)
    y_cv = y - theta * (cov - cov.mean())

    def diff(values: np.ndarray) -> tuple[float, float]:
        a, b = values[:n_h], values[n_h:]
        return float(b.mean() - a.mean()), math.sqrt(a.var(ddof=1) / n_h + b.var(ddof=1) / n_e)

    return (*diff(y), *diff(y_cv))
