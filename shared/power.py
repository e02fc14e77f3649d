"""Fixed-horizon power arithmetic shared by the planner and the readout (normal approximation)."""

from __future__ import annotations

import math

from statistics import NormalDist

N01 = _N = NormalDist()  # the stdlib normal (Wichura AS241 quantiles) keeps scipy out of `armlock plan`: it starts fast


def z_sum(alpha: float, power: float) -> float:
    """z_{1-alpha/2} + z_{power}: the multiplier that turns a standard error into a minimum detectable effect."""
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1), got {alpha!r}")
    if not 0.0 < power < 1.0:
        raise ValueError(f"power must lie in (0, 1), got {power!r}")
    return float(-_N.inv_cdf(alpha / 2.0) + _N.inv_cdf(power))


def mde(se: float, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """Minimum detectable effect (two-sided test at level alpha, given power) for an estimate with standard error se.

    >>> round(mde(1.0), 4)  # 1.95996 + 0.84162
    2.8016
    """
    return z_sum(alpha, power) * se


def se_difference(sd: float, n_a: float, n_b: float) -> float:
    """Standard error of a difference of two arm means with a common per-unit SD: sd * sqrt(1/n_a + 1/n_b)."""
    if n_a <= 0 or n_b <= 0:
        raise ValueError(f"arm sizes must be positive, got {n_a!r} and {n_b!r}")
    return sd * math.sqrt(1.0 / n_a + 1.0 / n_b)


def units_needed(effect: float, sd: float, share: float, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """Total units (both arms) so that a difference `effect` is detected, with `share` of them in one arm.

    Solves z_sum * sd * sqrt(1/(share N) + 1/((1-share) N)) = effect for N. At share 0.5 this is twice
    the textbook n = 2 (z_{1-a/2} + z_{1-b})^2 sd^2 / effect^2 per arm.
    """
    if effect <= 0 or sd <= 0:
        raise ValueError(f"effect and sd must be positive, got {effect!r} and {sd!r}")
    if not 0.0 < share < 1.0:
        raise ValueError(f"share must lie in (0, 1), got {share!r}")
    return (z_sum(alpha, power) * sd / effect) ** 2 * (1.0 / share + 1.0 / (1.0 - share))


def power_at(effect: float, se: float, *, alpha: float = 0.05, z_crit: float | None = None) -> float:
    """Power of the two-sided test (reject when |estimate| > z_crit * se) if the true difference is `effect`.

    `z_crit` defaults to z_{1-alpha/2}; pass a wider multiplier (e.g. an anytime-valid factor) to get the
    power of a test that reads a wider interval at the end. Both rejection tails are counted.
    """
    if se <= 0:
        raise ValueError(f"se must be positive, got {se!r}")
    z = float(-_N.inv_cdf(alpha / 2.0)) if z_crit is None else z_crit
    lam = abs(effect) / se
    return float(_N.cdf(lam - z) + _N.cdf(-z - lam))


def conversion_mde(p: float, n_a: float, n_b: float, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """Smallest upward change of a conversion rate p detectable between arms of n_a and n_b units.

    Arcsine (Cohen's h) scale, where the variance does not depend on p: h = z_sum * sqrt(1/n_a + 1/n_b),
    and p2 = sin^2(asin(sqrt p) + h/2). Returns p2 - p (a difference of rates, not a relative lift).
    """
    if not 0.0 < p < 1.0:
        raise ValueError(f"p must lie in (0, 1), got {p!r}")
    h = z_sum(alpha, power) * math.sqrt(1.0 / n_a + 1.0 / n_b)
    angle = min(math.asin(math.sqrt(p)) + h / 2.0, math.pi / 2.0)
    return math.sin(angle) ** 2 - p


def extra_variance(diff: float, mean: float, sd: float) -> float:
    """How much the exposed arm's revenue variance grows when the ad adds `diff` per unit by bringing more buyers.

    Model: a unit's revenue is one basket with probability p; the ad raises p, baskets are unchanged. With
    E[Y^2] = (sd^2 + mean^2) / p per buyer fixed, the variance at mean + diff is
    sd^2 + diff (sd^2 / mean - mean) - diff^2 (whatever p is), so the increment is returned.
    """
    return diff * (sd ** 2 / mean - mean) - diff ** 2


def power_two_variances(diff: float, se_null: float, se_alt: float, *, z_crit: float) -> float:
    """Power when the critical value uses the SE under no effect and the estimate's spread is the SE under the effect
    (the construction of Fleiss's sample size for two proportions, R's power.prop.test)."""
    return float(_N.cdf((diff - z_crit * se_null) / se_alt) + _N.cdf((-diff - z_crit * se_null) / se_alt))


def units_needed_two_variances(diff: float, var_null: float, var_alt_holdout: float, var_alt_exposed: float,
                               share: float, *, z_crit: float, z_power: float) -> float:
    """Total units so that `diff` is detected: [z_crit sqrt(v0 c) + z_power sqrt(vh/h + ve/(1-h))]^2 / diff^2,
    c = 1/h + 1/(1-h). With equal variances this is `units_needed`."""
    c = 1.0 / share + 1.0 / (1.0 - share)
    alt = var_alt_holdout / share + var_alt_exposed / (1.0 - share)
    return (z_crit * math.sqrt(var_null * c) + z_power * math.sqrt(alt)) ** 2 / diff ** 2
