"""Exact sums of floats, so that every engine gives bit-identical moments whatever the order of the rows.

A float sum depends on the order of its terms; pandas and Spark add in different orders, so
their means and m2 would differ in the last bits and the reports would not be identical. Both
engines therefore add exactly and round once: every finite double is an integer mantissa times a
power of two, ``x = m * 2**e`` with ``|m| < 2**53``; integer mantissas grouped by exponent add
without error (numpy here, ``sum(DECIMAL(38, 0))`` in Spark), and the driver turns the few
``(e, sum of m)`` pairs into one exact fraction, rounded once to the nearest double (Python's
``float(Fraction)`` rounds correctly). The result is the correctly rounded sum, the same value
``math.fsum`` gives (Shewchuk 1997, "Adaptive precision floating-point arithmetic and fast robust
geometric predicates"; Python's `math.fsum` documents it as exactly rounded).
"""

from __future__ import annotations

from collections.abc import Iterable
from fractions import Fraction

import numpy as np

_HALF = 26  # mantissas are split in two halves of at most 27 bits: float64 bincounts of them stay exact
_CHUNK = 1 << 25  # rows per bincount: 2**25 * 2**27 < 2**53


def exact_parts(x: np.ndarray) -> dict[int, int]:
    """{e: sum of m} over the finite values of `x` (x = m * 2**e): their exact sum, in parts."""
    x = np.asarray(x, dtype=np.float64)
    x = x[np.isfinite(x)]
    mant, ex = np.frexp(x)
    m = (mant * float(1 << 53)).astype(np.int64)  # exact: |mant| < 1
    e = ex.astype(np.int64) - 53
    out: dict[int, int] = {}
    if not len(x):
        return out
    lo_e = int(e.min())
    for start in range(0, len(x), _CHUNK):
        mc, ec = m[start:start + _CHUNK], e[start:start + _CHUNK] - lo_e
        hi = mc >> _HALF
        lo = mc - (hi << _HALF)
        width = int(ec.max()) + 1
        his = np.bincount(ec, weights=hi.astype(np.float64), minlength=width)
        los = np.bincount(ec, weights=lo.astype(np.float64), minlength=width)
        for off in np.flatnonzero((his != 0) | (los != 0)):
            key = int(off) + lo_e
            out[key] = out.get(key, 0) + (int(his[off]) << _HALF) + int(los[off])
    return out


def exact_total(parts: Iterable[tuple[int, int]]) -> Fraction:
    """The exact value of sum(m * 2**e) over (e, m) pairs."""
    total = Fraction(0)
    for e, m in parts:
        total += Fraction(int(m)) * (Fraction(2) ** int(e))
    return total


def exact_sum(x: np.ndarray) -> Fraction:
    """The exact sum of the finite values of `x`."""
    return exact_total(exact_parts(x).items())


def rounded_sum(x: np.ndarray) -> float:
    """The correctly rounded sum of `x` (as `math.fsum`, but vectorized)."""
    return float(exact_sum(x))


def rounded_mean(total: Fraction, n: int) -> float:
    """The correctly rounded mean of n values whose exact sum is `total` (NaN when n is 0)."""
    return float(total / n) if n else float("nan")
