"""Exact float sums against Python's math.fsum (correctly rounded: Shewchuk 1997, documented in the Python library)."""

from __future__ import annotations

import math

from fractions import Fraction

import numpy as np
import pytest

from armlock.shared import exactsum
from armlock.shared.exactsum import exact_parts, exact_total, rounded_mean, rounded_sum, to_float, weighted_exact_sum


@pytest.mark.parametrize("seed", range(6))
def test_rounded_sum_equals_fsum(seed: int) -> None:
    rng = np.random.default_rng(seed)
    x = np.concatenate([rng.normal(1e9, 1.0, 3000), rng.lognormal(3.7, 2.0, 3000) * rng.choice([-1, 1], 3000),
                        [1e300, -1e300, 5e-324, 2.0**-1022, 0.0, -0.0], rng.integers(0, 5, 500).astype(float)])
    rng.shuffle(x)
    assert rounded_sum(x) == math.fsum(x)
    assert rounded_sum(x[::-1]) == math.fsum(x)  # order does not matter


def test_parts_are_exact_and_skip_non_finite() -> None:
    x = np.array([0.1, 0.2, 0.3, np.nan, np.inf, -np.inf])
    parts = exact_parts(x)
    assert exact_total(parts.items()) == sum(map(__import__("fractions").Fraction, [0.1, 0.2, 0.3]))
    assert rounded_sum(x) == math.fsum([0.1, 0.2, 0.3])
    assert math.isnan(rounded_mean(exact_total([]), 0))


@pytest.mark.parametrize("seed", range(4))
def test_weighted_exact_sum_equals_fractions_and_fsum(seed: int, monkeypatch: pytest.MonkeyPatch) -> None:
    # Reference: Python's fractions.Fraction (exact rationals) for the exact value, and math.fsum
    # (correctly rounded, Shewchuk 1997) of the values repeated by their counts for the rounded one.
    rng = np.random.default_rng(seed)
    x = np.concatenate([rng.normal(1e9, 1.0, 300), rng.lognormal(3.7, 2.0, 300) * rng.choice([-1, 1], 300),
                        [1e300, -1e300, 5e-324, 2.0**-1022, 0.0, -0.0, np.inf, np.nan], rng.integers(0, 5, 50)])
    counts = rng.integers(0, 40, len(x))
    exact = sum((Fraction(float(v)) * int(n) for v, n in zip(x, counts) if math.isfinite(v)), Fraction(0))
    assert weighted_exact_sum(x, counts) == exact
    assert to_float(weighted_exact_sum(x, counts)) == math.fsum(np.repeat(x[np.isfinite(x)], counts[np.isfinite(x)]))
    monkeypatch.setattr(exactsum, "_COUNT_MAX", 1)  # the Python-integer path for huge counts
    assert weighted_exact_sum(x, counts) == exact
