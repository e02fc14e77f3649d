"""Fixed-horizon power arithmetic shared by the planner and the readout (normal approximation)."""

from __future__ import annotations

from scipy.stats import norm


def z_sum(alpha: float, power: float) -> float:
    """z_{1-alpha/2} + z_{power}: the multiplier that turns a standard error into a minimum detectable effect."""
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie in (0, 1), got {alpha!r}")
    if not 0.0 < power < 1.0:
        raise ValueError(f"power must lie in (0, 1), got {power!r}")
    return float(norm.isf(alpha / 2.0) + norm.ppf(power))


def mde(se: float, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """Minimum detectable effect (two-sided test at level alpha, given power) for an estimate with standard error se.

    >>> round(mde(1.0), 4)  # 1.95996 + 0.84162
    2.8016
    """
    return z_sum(alpha, power) * se
