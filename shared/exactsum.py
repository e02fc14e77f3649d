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

import math

from collections.abc import Iterable
from fractions import Fraction

import numpy as np

_HALF = 26  # mantissas are split in two halves of at most 27 bits: float64 bincounts of them stay exact
_CHUNK = 1 << 25  # rows per bincount: 2**25 * 2**27 < 2**53


def exact_parts(x: np.ndarray) -> dict[int, int]:
    """{e: sum of m} over the finite values of `x` (x = m * 2**e): their exact sum, in parts."""
    x = np.asarray(x, dtype=np.float64)
    fin = np.isfinite(x)
    if not fin.all():
        x = x[fin]
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


def to_float(value: Fraction | int) -> float:
    """An exact value as the nearest float; beyond the float range, +/-inf (never an OverflowError:
    a sum of values near 1e308 overflows, and the statistics treat an infinite moment explicitly)."""
    try:
        return float(value)
    except OverflowError:
        return float("inf") if value > 0 else float("-inf")


def rounded_sum(x: np.ndarray) -> float:
    """The correctly rounded sum of `x` (as `math.fsum`, but vectorized); +/-inf beyond the float range."""
    return to_float(exact_sum(x))


def rounded_mean(total: Fraction, n: int) -> float:
    """The correctly rounded mean of n values whose exact sum is `total` (NaN when n is 0)."""
    return to_float(total / n) if n else float("nan")


_COUNT_MAX = 1 << 36  # weighted sums: a total count below 2**36 keeps every int64 partial sum below 2**63


def weighted_exact_sum(x: np.ndarray, counts: np.ndarray) -> Fraction:
    """The exact sum of counts[j] * x[j] over the finite x[j] (counts: non-negative integers).

    A column with few distinct values is summed over them, each weighted by how often it occurs
    (the same exact sum as over the rows, so the same rounded bits). Each x = m * 2**(ex - 53)
    with an integer |m| < 2**53, cut into hi = m >> 26 (|hi| <= 2**27) and lo (0 <= lo < 2**26);
    count * hi and count * lo are summed per exponent in int64, exact while the counts total
    less than 2**36 (else Python integers do it, slowly but exactly).
    """
    x = np.asarray(x, dtype=np.float64).ravel()
    c = np.asarray(counts, dtype=np.int64).ravel()
    keep = (c != 0) & np.isfinite(x) & (x != 0)
    x, c = x[keep], c[keep]
    if not len(x):
        return Fraction(0)
    if int(c.sum()) >= _COUNT_MAX:
        return exact_total((e, m * int(n)) for (m, e), n in zip(map(_mantissa, x.tolist()), c.tolist()))
    mant, ex = np.frexp(x)
    m = (mant * float(1 << 53)).astype(np.int64)  # exact: |mant| < 1
    hi = m >> _HALF
    lo = m - (hi << _HALF)
    lo_e = int(ex.min())
    slot = (ex - lo_e).astype(np.intp)
    width = int(slot.max()) + 1
    sh, sl = np.zeros(width, np.int64), np.zeros(width, np.int64)
    np.add.at(sh, slot, c * hi)
    np.add.at(sl, slot, c * lo)
    return exact_total((int(k) + lo_e - 53, (int(sh[k]) << _HALF) + int(sl[k]))
                       for k in np.flatnonzero((sh != 0) | (sl != 0)))


def _mantissa(v: float) -> tuple[int, int]:
    """(m, e) with v = m * 2**e exactly (m an integer)."""
    f, e = math.frexp(v)
    return int(f * (1 << 53)), e - 53


_BLOCK = 1 << 15  # rows per step of `grouped_exact_sums`: its temporaries stay in the CPU cache


def grouped_exact_sums(x: np.ndarray, group: np.ndarray, groups: int) -> list[Fraction]:
    """The exact sum of the finite values of `x` in each group 0..groups-1, in one vectorized pass.

    Each mantissa (frexp: x = f * 2**ex, 0.5 <= |f| < 1) is cut into an integer high part below
    2**27 and a low part of 26 bits; float64 bincounts of either stay exact for 2**25 rows, after
    which the running totals move to Python integers. Blocks of `_BLOCK` rows keep it fast.
    """
    x = np.asarray(x, dtype=np.float64).ravel()
    group = np.asarray(group, dtype=np.int64).ravel()
    fin = np.isfinite(x)
    if not fin.all():  # zeros stay: they add nothing, and a masked copy of 2 M rows costs more than the whole sum
        x, group = x[fin], group[fin]
    if not len(x):
        return [Fraction(0)] * groups
    mant, ex = np.frexp(x)
    lo_e = int(ex.min())
    width = int(ex.max()) - lo_e + 1
    size = groups * width
    th, tl = np.zeros(size), np.zeros(size)
    acc: dict[int, int] = {}

    def flush() -> None:
        for k in np.flatnonzero((th != 0) | (tl != 0)):
            acc[int(k)] = acc.get(int(k), 0) + (int(th[k]) << _HALF) + int(tl[k])
        th[:] = 0
        tl[:] = 0

    since = 0
    for start in range(0, len(x), _BLOCK):
        f = mant[start:start + _BLOCK] * float(1 << 27)
        hi = np.floor(f)  # an integer, |hi| <= 2**27
        lo = (f - hi) * float(1 << _HALF)  # an integer, 0 <= lo < 2**26 (both steps exact)
        key = group[start:start + _BLOCK] * width + (ex[start:start + _BLOCK] - lo_e)
        th += np.bincount(key, weights=hi, minlength=size)
        tl += np.bincount(key, weights=lo, minlength=size)
        since += _BLOCK
        if since >= _CHUNK:
            flush()
            since = 0
    flush()
    parts: list[list[tuple[int, int]]] = [[] for _ in range(groups)]
    for k, s in acc.items():  # x = (hi * 2**26 + lo) * 2**(ex - 53)
        parts[k // width].append((k % width + lo_e - 53, s))
    return [exact_total(p) for p in parts]
