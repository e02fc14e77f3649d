"""Covariate balance against Austin's formulas by hand, statsmodels and scipy."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.meta_analysis import effectsize_smd

from armlock.assign import spec_from_dict
from armlock.audit.balance import (
    check_balance,
    chi2_independence_p,
    sample_variance,
    smd_binary,
    smd_continuous,
    kruskal_from_ranks,
    pool_rare_levels,
    randomization_mean_p,
    smd_chance_se,
    two_by_two_p,
    variance_ratio,
)
from armlock.shared.engine_pandas import numeric_moments
from armlock.shared.tables import NUMERIC_COLUMNS, BalanceTables, merge_moments


def test_smd_continuous_hand_computation() -> None:
    # Austin (2009), Statistics in Medicine 28(25), continuous covariates:
    # d = (mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2). Means 10.5 vs 10.0, SDs 2.2 vs 2.0:
    # d = 0.5 / sqrt((4.84 + 4) / 2) = 0.5 / sqrt(4.42) = 0.237826, VR = 4.84 / 4 = 1.21
    # (REFERENCES.md §4, DERIVED values).
    assert smd_continuous(10.5, 2.2**2, 10.0, 2.0**2) == pytest.approx(0.5 / math.sqrt(4.42))
    assert smd_continuous(10.5, 2.2**2, 10.0, 2.0**2) == pytest.approx(0.237826, abs=1e-6)


def test_smd_binary_hand_computation_and_austin_phi_equivalence() -> None:
    # Austin (2009), binary: d = (p_T - p_C) / sqrt((p_T(1-p_T) + p_C(1-p_C)) / 2);
    # 0.35 vs 0.30 -> 0.05 / sqrt((0.2275 + 0.21) / 2) = 0.106904 (REFERENCES.md §4, DERIVED).
    assert smd_binary(0.35, 0.30) == pytest.approx(0.05 / math.sqrt(0.4375 / 2))
    assert smd_binary(0.35, 0.30) == pytest.approx(0.106904, abs=1e-6)
    # Austin (2009), Communications in Statistics - Simulation and Computation 38(6): an SMD of
    # 0.1 corresponds to phi = 0.05; REFERENCES.md §4 VERIFIED p_T = 0.5499 at p_C = 0.5 and
    # p_T = 0.1320 at p_C = 0.1 for SMD 0.1.
    assert smd_binary(0.5499, 0.5) == pytest.approx(0.1, abs=5e-4)
    assert smd_binary(0.1320, 0.1) == pytest.approx(0.1, abs=5e-4)


def test_smd_matches_statsmodels_effectsize_smd_without_bias_correction() -> None:
    # statsmodels.stats.meta_analysis.effectsize_smd returns Hedges' bias-corrected SMD with the
    # pooled SD sqrt(((n1-1)s1^2 + (n2-1)s2^2) / (n1+n2-2)) and correction 1 - 3/(4N - 9)
    # (statsmodels source, after Borenstein 2009). With equal group sizes the pooled SD equals
    # Austin's sqrt((s1^2 + s2^2)/2), so Austin's d = smd_bc / correction.
    rng = np.random.default_rng(1)
    t, c = rng.gamma(2.0, 3.0, 4000), rng.gamma(2.1, 3.0, 4000)
    bc, _ = effectsize_smd(t.mean(), t.std(ddof=1), len(t), c.mean(), c.std(ddof=1), len(c))
    corr = 1 - 3 / (4 * (len(t) + len(c)) - 9)
    ours = smd_continuous(t.mean(), t.var(ddof=1), c.mean(), c.var(ddof=1))
    assert ours == pytest.approx(bc / corr, rel=1e-10)


def _exact_mean(x: np.ndarray) -> float:
    return float(sum(map(Fraction, x.tolist())) / len(x))


def _exact_var(x: np.ndarray) -> float:
    vals = list(map(Fraction, x.tolist()))
    m = sum(vals) / len(vals)
    return float(sum((v - m) ** 2 for v in vals) / (len(vals) - 1))


def test_moments_match_numpy_and_keep_precision_at_a_large_offset() -> None:
    # Reference: numpy mean / var(ddof=1) on the raw values. 1e9 + N(0, 1): raw sums of squares
    # would cancel to nothing (mean/SD = 1e9); central moments keep the SMD to 1e-9.
    rng = np.random.default_rng(2)
    for x in (rng.lognormal(3, 1, 10_000), 1e9 + rng.normal(0, 1, 10_000)):
        arm = rng.integers(0, 2, len(x))
        rows = numeric_moments(x, arm, 2)
        for i in (0, 1):
            assert rows[i]["mean"] == pytest.approx(x[arm == i].mean(), rel=1e-15)
            var = sample_variance(int(rows[i]["n"]), float(rows[i]["m2"]))
            assert var == pytest.approx(x[arm == i].var(ddof=1), rel=1e-9)
        a, b = x[arm == 1], x[arm == 0]
        # the SMD reference in exact rational arithmetic (Python's fractions): at 1e9 numpy's own
        # pairwise means are off by an ulp (1.2e-7), more than the 1e-9 asked of ours
        ref = (_exact_mean(a) - _exact_mean(b)) / math.sqrt((_exact_var(a) + _exact_var(b)) / 2)
        ours = smd_continuous(float(rows[1]["mean"]), sample_variance(int(rows[1]["n"]), float(rows[1]["m2"])),
                              float(rows[0]["mean"]), sample_variance(int(rows[0]["n"]), float(rows[0]["m2"])))
        assert abs(ours - ref) < 1e-9


def test_merge_moments_equals_the_pooled_moments() -> None:
    # Chan, Golub & LeVeque (1979), pairwise update; reference: numpy on the pooled values.
    rng = np.random.default_rng(9)
    x = 1e9 + rng.normal(0, 1, 3001)
    parts = np.array_split(x, 7)
    acc = (0, 0.0, 0.0)
    for p in parts:
        acc = merge_moments(acc, (len(p), float(p.mean()), float(((p - p.mean()) ** 2).sum())))
    assert acc[0] == len(x)
    assert acc[1] == pytest.approx(x.mean(), rel=1e-15)
    # each part's mean is rounded to the spacing of doubles near 1e9 (1.2e-7), so 1e-8 relative
    assert acc[2] / (len(x) - 1) == pytest.approx(x.var(ddof=1), rel=1e-8)


def test_rank_sums_and_ties_give_scipy_kruskal() -> None:
    # Reference: scipy.stats.kruskal (Kruskal & Wallis 1952, with the tie correction); the rank sums
    # come from the pooled average ranks (scipy.stats.rankdata), as audit.tables documents.
    rng = np.random.default_rng(10)
    x = np.where(rng.random(900) < 0.6, 0.0, np.round(rng.lognormal(3, 1, 900), 0))
    arm = rng.integers(0, 3, 900)
    rows = numeric_moments(x, arm, 3)
    n = np.array([r["n"] for r in rows], dtype=float)
    r_sum = np.array([r["rank_sum"] for r in rows])
    big_n = n.sum()
    h = 12 / (big_n * (big_n + 1)) * (r_sum ** 2 / n).sum() - 3 * (big_n + 1)
    h /= 1 - rows[0]["ties"] / (big_n ** 3 - big_n)
    ref = stats.kruskal(*(x[arm == i] for i in range(3)))
    assert h == pytest.approx(ref.statistic, rel=1e-10)


def test_randomization_variance_of_the_mean_difference_equals_full_enumeration() -> None:
    # DERIVED (Cochran 1977, Sampling Techniques, variance of a mean under sampling without
    # replacement): over all ways to allocate the pooled units, mean_T - mean_C has variance
    # S^2 (1/n_T + 1/n_C). Reference: brute-force enumeration of every allocation of 10 units (numpy).
    from itertools import combinations
    x = np.array([0.0, 0.0, 0.0, 1.0, 2.0, 3.5, 10.0, 0.0, 40.0, 7.0])
    diffs = []
    for t in combinations(range(10), 4):
        mask = np.zeros(10, bool)
        mask[list(t)] = True
        diffs.append(x[mask].mean() - x[~mask].mean())
    enum_var = np.var(diffs)  # over all 210 allocations (mean is exactly 0)
    assert enum_var == pytest.approx(x.var(ddof=1) * (1 / 4 + 1 / 6), rel=1e-12)
    z = 1.5 / math.sqrt(enum_var)
    assert randomization_mean_p(4, 1.5, 6, 0.0, x.var(ddof=1)) == pytest.approx(2 * stats.norm.sf(z), rel=1e-12)
    assert smd_chance_se(100, 900) == pytest.approx(math.sqrt(1 / 100 + 1 / 900))


def test_kruskal_from_ranks_equals_scipy_kruskal_and_mannwhitney() -> None:
    # References: scipy.stats.kruskal (Kruskal & Wallis 1952) and, for two arms,
    # scipy.stats.mannwhitneyu(use_continuity=False, method="asymptotic") (two-sided).
    rng = np.random.default_rng(12)
    x = np.where(rng.random(700) < 0.7, 0.0, np.round(rng.lognormal(3, 1, 700), 1))
    arm = (rng.random(700) < 0.2).astype(int)
    rows = numeric_moments(x, arm, 2)
    p = kruskal_from_ranks(np.array([r["n"] for r in rows]), np.array([r["rank_sum"] for r in rows]),
                           float(rows[0]["ties"]))
    assert p == pytest.approx(stats.kruskal(x[arm == 0], x[arm == 1]).pvalue, rel=1e-10)
    mw = stats.mannwhitneyu(x[arm == 0], x[arm == 1], use_continuity=False, method="asymptotic").pvalue
    assert p == pytest.approx(mw, rel=1e-8)


def test_two_by_two_uses_fisher_for_small_cells_and_chi2_otherwise() -> None:
    # References: scipy.stats.fisher_exact (Fisher 1922) and scipy.stats.chi2_contingency.
    small = np.array([[3, 97], [0, 900]])
    assert two_by_two_p(small) == pytest.approx(stats.fisher_exact(small).pvalue)
    large = np.array([[300, 700], [2900, 6100]])
    assert two_by_two_p(large) == pytest.approx(stats.chi2_contingency(large, correction=False).pvalue)


def test_rare_levels_are_pooled_by_their_totals_only() -> None:
    t = np.array([[500, 4500], [2, 20], [1, 10], [400, 3600]])
    out = pool_rare_levels(t)
    np.testing.assert_array_equal(out, [[500, 4500], [400, 3600]])  # 33 units pooled: 3.3 expected, dropped
    t2 = np.array([[500, 4500], [4, 30], [3, 35], [400, 3600]])  # 3.4 and 3.8 expected: 7.2 when pooled
    np.testing.assert_array_equal(pool_rare_levels(t2), [[500, 4500], [400, 3600], [7, 65]])


def test_variance_ratio_edge_values() -> None:
    assert variance_ratio(0.0, 0.0) == 1.0
    assert variance_ratio(2.0, 0.0) == math.inf
    assert variance_ratio(4.0, 2.0) == 2.0


def test_chi2_independence_matches_scipy_and_ignores_empty_levels() -> None:
    table = np.array([[120, 130], [80, 60], [0, 0], [30, 45]])
    ref = stats.chi2_contingency(table[[0, 1, 3]], correction=False).pvalue
    assert chi2_independence_p(table) == pytest.approx(ref)


SPEC = spec_from_dict({"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                       "audit": {"covariates": ["x", "flag"], "categorical_covariates": ["dev"]}})


def _tables(data: dict[str, tuple[np.ndarray, np.ndarray]], cats: dict[str, pd.DataFrame]) -> BalanceTables:
    rows = []
    for cov, (h, e) in data.items():
        x = np.concatenate([h, e])
        arm = np.repeat([0, 1], [len(h), len(e)])
        for name, r in zip(("holdout", "exposed"), numeric_moments(x, arm, 2)):
            rows.append({"covariate": cov, "arm": name, **{c: r[c] for c in NUMERIC_COLUMNS[2:]}})
    return BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS), categorical=cats)


def test_check_balance_figures_equal_direct_computation_and_flag_imbalance() -> None:
    rng = np.random.default_rng(5)
    h, e = rng.normal(10, 2, 5000), rng.normal(10.5, 2.2, 5000)  # SMD about 0.24 -> warn (0.1 < d <= 0.25)
    fh, fe = (rng.random(5000) < 0.3).astype(float), (rng.random(5000) < 0.3).astype(float)
    cats = {"dev": pd.DataFrame({"holdout": [3000, 2000], "exposed": [2990, 2010]},
                                index=pd.Index(["mobile", "desktop"], name="level"))}
    check = check_balance(SPEC, _tables({"x": (h, e), "flag": (fh, fe)}, cats))
    rows = {(r[0], r[1]): r for r in check.tables[0].rows}
    expect = (e.mean() - h.mean()) / math.sqrt((e.var(ddof=1) + h.var(ddof=1)) / 2)
    assert rows[("x", None)][5] == pytest.approx(expect, abs=1e-6)
    assert rows[("x", None)][7] == pytest.approx(e.var(ddof=1) / h.var(ddof=1), abs=1e-6)
    assert rows[("flag", None)][5] == pytest.approx(smd_binary(fe.mean(), fh.mean()), abs=1e-6)
    assert rows[("flag", None)][7] is None  # no variance ratio for a binary covariate
    assert rows[("dev", "mobile")][5] == pytest.approx(smd_binary(2990 / 5000, 3000 / 5000), abs=1e-6)
    assert check.status == "warn"
    assert check.figures["worst_covariate"].value == "x"
    big = check_balance(SPEC, _tables({"x": (h, h + 1.0), "flag": (fh, fe)}, cats))
    assert big.status == "fail"  # |SMD| about 0.5 > 0.25
    same = check_balance(SPEC, _tables({"x": (h, rng.permutation(h)), "flag": (fh, fh)}, cats))
    assert same.status == "pass"
