"""The readout's shared rules: numpy's quantile rule from order statistics, exact grouped moments.

References outside the project: numpy's own `numpy.quantile` (default method "linear", Hyndman &
Fan 1996, "Sample quantiles in statistical packages", type 7) and `math.fsum` (Shewchuk 1997,
exactly rounded sums), against which the engine-neutral rules are held bit for bit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from armlock.shared.exactsum import grouped_exact_sums
from armlock.readout.engine_pandas import grouped_moments
from armlock.readout.rules import fill_value, linear_quantile
from armlock.shared.readout_tables import Moments


@pytest.mark.parametrize("seed", range(6))
def test_linear_quantile_is_numpys_bit_for_bit(seed: int) -> None:
    rng = np.random.default_rng(seed)
    for n in (1, 2, 3, 7, 10, 101, 997, 5000):
        x = np.round(rng.lognormal(3, 1.2, n) * (rng.random(n) < 0.3), 2)  # many ties at 0, as unit revenue
        s = np.sort(x)
        for q in (0.5, 0.9, 0.95, 0.99, 0.999, 0.9999, 0.123456789, rng.random()):
            assert linear_quantile(n, q, lambda i, s=s: float(s[i])) == float(np.quantile(x, q)), (n, q)


def test_grouped_exact_sums_equal_fsum() -> None:
    rng = np.random.default_rng(7)
    x = rng.standard_normal(50_000) * 10.0 ** rng.integers(-200, 200, 50_000)
    x[::11] = 0.0
    x[5], x[6] = np.inf, np.nan  # non-finite values are left out
    g = rng.integers(0, 4, len(x))
    sums = grouped_exact_sums(x, g, 5)
    for i in range(5):
        v = x[(g == i) & np.isfinite(x)]
        assert float(sums[i]) == math.fsum(v)


def test_grouped_moments_are_exact_and_order_free() -> None:
    rng = np.random.default_rng(11)
    n = 4000
    data = np.c_[rng.lognormal(3, 1, n) * (rng.random(n) < 0.2) + 1e6, rng.poisson(0.3, n),
                 rng.random(n) < 0.5, rng.normal(50, 20, n)].astype(np.float64)
    group = rng.integers(0, 3, n)
    names = ("a", "b", "c", "d")
    got = grouped_moments(names, data, group, 4)
    perm = rng.permutation(n)
    again = grouped_moments(names, data[perm], group[perm], 4)
    for g in range(3):
        rows = data[group == g]
        ref = Moments.of(names, rows)
        assert got[g].n == ref.n
        # the means are the correctly rounded means (the exact sum over n, rounded once)
        assert got[g].means.tolist() == [_exact_mean(rows[:, j]) for j in range(4)]
        np.testing.assert_allclose(got[g].m2, ref.m2, rtol=1e-9, atol=1e-6)
        assert np.array_equal(got[g].means, again[g].means) and np.array_equal(got[g].m2, again[g].m2)
        # the cross-products are the exact sums of the centred products, rounded once
        d = rows - got[g].means
        assert got[g].m2[0, 3] == math.fsum(d[:, 0] * d[:, 3])
    assert got[3].n == 0 and not got[3].means.any()


def _exact_mean(x: np.ndarray) -> float:
    from fractions import Fraction

    return float(sum((Fraction(v) for v in x), Fraction(0)) / len(x))


def test_fill_value() -> None:
    assert fill_value(7, 2) == 3.5
    assert fill_value(0, 0) == 0.0
    assert fill_value(1, 1, pos_inf=1) == math.inf
    assert math.isnan(fill_value(1, 1, pos_inf=1, neg_inf=1))
