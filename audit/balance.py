"""Covariate balance: SMD and variance ratio (Austin 2009) shown; status from randomization tests at this size, Holm."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.assign import Spec

from armlock.shared.report import Check, Figure, Status, Table
from .srm import holm
from armlock.shared.tables import BalanceTables

# Fewer units with a value than this in an arm: the covariate is "too few units to judge". At 30
# units the normal approximations of the rank and mean tests hold well enough for the audit's
# thresholds (measured in scripts/calibrate_audit.py; 30 is also the common-practice rule of thumb).
MIN_ARM_UNITS = 30
# Categorical levels (and binary 2x2 cells) with fewer expected units than this are pooled /
# tested exactly (Cochran's rule for the chi-square approximation, common practice).
MIN_EXPECTED = 5.0
OVERFLOW_NOTE = "not testable: values too large to sum (a square overflows a float)"


def smd_continuous(mean_t: float, var_t: float, mean_c: float, var_c: float) -> float:
    """d = (mean_T - mean_C) / sqrt((s_T^2 + s_C^2) / 2)  (Austin 2009, Statistics in Medicine)."""
    pooled = math.sqrt((var_t + var_c) / 2.0)
    if pooled == 0.0:
        return 0.0 if mean_t == mean_c else math.copysign(math.inf, mean_t - mean_c)
    return (mean_t - mean_c) / pooled


def smd_binary(p_t: float, p_c: float) -> float:
    """d = (p_T - p_C) / sqrt((p_T(1-p_T) + p_C(1-p_C)) / 2)  (Austin 2009, binary covariates)."""
    return smd_continuous(p_t, p_t * (1 - p_t), p_c, p_c * (1 - p_c))


def sample_variance(n: int, m2: float) -> float:
    """Sample variance (ddof = 1) from n and the sum of squared deviations m2 (NaN below 2 values)."""
    return m2 / (n - 1) if n >= 2 else math.nan


def variance_ratio(var_t: float, var_c: float) -> float:
    """s_T^2 / s_C^2; 1 when both are 0 (two constant arms are alike), inf when only the reference is 0."""
    if var_c == 0.0:
        return 1.0 if var_t == 0.0 else math.inf
    return var_t / var_c


def smd_chance_se(n_t: int, n_c: int) -> float:
    """How large |SMD| gets by chance alone: its standard error under random allocation, sqrt(1/n_T + 1/n_C).

    DERIVED: under randomization the difference of means has variance S^2 (1/n_T + 1/n_C), S^2 the
    pooled variance (Cochran 1977, Sampling Techniques, variance of a mean under sampling without
    replacement); dividing by the SD gives the SMD's SE. Austin (2009) discusses this sampling
    spread of the SMD.
    """
    return math.sqrt(1.0 / n_t + 1.0 / n_c)


def pooled_moments(parts: list[tuple[int, float, float]]) -> tuple[int, float, float]:
    """(n, mean, m2) of the union of arms (Chan, Golub & LeVeque 1979 merge)."""
    from armlock.shared.tables import merge_moments

    acc: tuple[int, float, float] = (0, 0.0, 0.0)
    for p in parts:
        acc = merge_moments(acc, p)
    return acc


def randomization_mean_p(n_t: int, m_t: float, n_c: int, m_c: float, pooled_var: float) -> float:
    """Two-sided p of the mean difference against its randomization distribution (normal approximation).

    Under random allocation of the n_T + n_C units, mean_T - mean_C has mean 0 and variance
    S^2 (1/n_T + 1/n_C), S^2 the pooled sample variance of both arms (DERIVED from Cochran 1977,
    sampling without replacement); this is the permutation test's variance.
    """
    from scipy import stats
    if pooled_var <= 0.0 or min(n_t, n_c) < 2:
        return math.nan
    z = (m_t - m_c) / math.sqrt(pooled_var * (1.0 / n_t + 1.0 / n_c))
    return float(2.0 * stats.norm.sf(abs(z)))


def kruskal_from_ranks(n: np.ndarray, rank_sum: np.ndarray, ties: float) -> float:
    """Kruskal-Wallis p from per-arm counts and rank sums of the pooled ranks (equals scipy.stats.kruskal).

    H = 12 / (N (N + 1)) sum_i R_i^2 / n_i - 3 (N + 1), divided by 1 - sum(t^3 - t) / (N^3 - N)
    (Kruskal & Wallis 1952); chi-square with k - 1 degrees of freedom. With two arms it is the
    two-sided Mann-Whitney / Wilcoxon rank-sum test without continuity correction.
    """
    from scipy import stats
    n = np.asarray(n, dtype=np.float64)
    r = np.asarray(rank_sum, dtype=np.float64)
    big = n.sum()
    denom = 1.0 - ties / (big**3 - big)
    if len(n) < 2 or denom <= 0.0:
        return math.nan
    h = (12.0 / (big * (big + 1.0)) * float((r * r / n).sum()) - 3.0 * (big + 1.0)) / denom
    return float(stats.chi2.sf(max(h, 0.0), len(n) - 1))


def chi2_independence_p(table: np.ndarray) -> float:
    """Chi-square test of independence of levels and arms (scipy.stats.chi2_contingency)."""
    from scipy import stats
    t = np.asarray(table, dtype=np.float64)
    t = t[t.sum(axis=1) > 0][:, t.sum(axis=0) > 0]
    if t.shape[0] < 2 or t.shape[1] < 2:
        return 1.0
    return float(stats.chi2_contingency(t, correction=False).pvalue)


def pool_rare_levels(counts: np.ndarray) -> np.ndarray:
    """Levels x arms counts with levels of fewer than MIN_EXPECTED expected units in some arm merged into one row.

    The merged row is dropped if it is still below the rule. Which levels merge depends only on the
    pooled level totals, not on the arms, so the test stays valid under randomization.
    """
    t = np.asarray(counts, dtype=np.float64)
    col = t.sum(axis=0)
    total = col.sum()
    if total == 0:
        return t
    expected_min = t.sum(axis=1) * col.min() / total
    rare = expected_min < MIN_EXPECTED
    if not rare.any():
        return t
    merged = t[rare].sum(axis=0, keepdims=True)
    keep = t[~rare]
    if merged.sum() * col.min() / total >= MIN_EXPECTED:
        keep = np.vstack([keep, merged])
    return keep


def two_by_two_p(table: np.ndarray) -> float:
    """Independence of a 2x2 table: chi-square, or Fisher's exact test when an expected cell is below 5."""
    from scipy import stats
    t = np.asarray(table, dtype=np.float64)
    if t.sum(axis=1).min() == 0 or t.sum(axis=0).min() == 0:
        return 1.0
    expected = np.outer(t.sum(axis=1), t.sum(axis=0)) / t.sum()
    if expected.min() < MIN_EXPECTED:
        return float(stats.fisher_exact(np.rint(t).astype(np.int64)).pvalue)
    return float(stats.chi2_contingency(t, correction=False).pvalue)


def _reference(spec: Spec) -> str:
    return spec.holdout_arms[0]


@dataclass
class _Row:
    covariate: str
    level: str | None
    arm: str
    ref: float | None
    value: float | None
    smd: float | None
    vr: float | None
    chance: float | None  # SMD's chance SE
    test: str
    p: float | None
    note: str = ""
    p_holm: float | None = None


def _numeric_rows(cov: str, g: pd.DataFrame, ref: str, others: list[str], arms: list[str]) -> list[_Row]:
    binary = bool(g["binary"].iloc[0])
    n = {a: int(g.loc[a, "n"]) for a in arms}
    mean = {a: float(g.loc[a, "mean"]) for a in arms}
    var = {a: sample_variance(n[a], float(g.loc[a, "m2"])) for a in arms}
    out: list[_Row] = []
    m2 = {a: float(g.loc[a, "m2"]) for a in arms}
    if not all(math.isfinite(mean[a]) and math.isfinite(m2[a]) for a in arms if n[a]):
        # a value so large (near 1e308) that its square or sum overflows: mean, SMD and the mean test
        # are meaningless; the rank test (ranks do not overflow) still judges whether the arms differ
        out += [_Row(covariate=cov, level=None, arm=arm, ref=None, value=None, smd=None, vr=None, chance=None,
                     test="-", p=None, note=OVERFLOW_NOTE) for arm in others]
        if min(n.values()) >= MIN_ARM_UNITS:
            p_rank = kruskal_from_ranks(np.array([n[a] for a in arms]),
                                        np.array([float(g.loc[a, "rank_sum"]) for a in arms]),
                                        float(g["ties"].iloc[0]))
            out.append(_Row(covariate=cov, level="(ranks, all arms)", arm=",".join(others), ref=None, value=None,
                            smd=None, vr=None, chance=None, test="rank-sum", p=p_rank))
        return out
    pooled_all = pooled_moments([(n[a], mean[a] if n[a] else 0.0, float(g.loc[a, "m2"])) for a in arms])
    constant = pooled_all[0] >= 2 and pooled_all[2] == 0.0
    for arm in others:
        nt, nc = n[arm], n[ref]
        base = dict(covariate=cov, level=None, arm=arm, ref=mean[ref] if nc else None,
                    value=mean[arm] if nt else None)
        if min(nt, nc) < 2:
            out.append(_Row(**base, smd=None, vr=None, chance=None, test="-", p=None,  # type: ignore[arg-type]
                            note="not testable: fewer than two values in an arm"))
            continue
        if constant:
            out.append(_Row(**base, smd=0.0, vr=1.0, chance=None, test="-", p=None,  # type: ignore[arg-type]
                            note="constant, not tested"))
            continue
        chance = smd_chance_se(nt, nc)
        if binary:
            d, vr = smd_binary(mean[arm], mean[ref]), None
            ones = np.array([mean[arm] * nt, mean[ref] * nc])
            table = np.array([[ones[0], nt - ones[0]], [ones[1], nc - ones[1]]])
            test, p = "chi-square / Fisher", two_by_two_p(np.rint(table))
        else:
            d, vr = smd_continuous(mean[arm], var[arm], mean[ref], var[ref]), variance_ratio(var[arm], var[ref])
            pair = pooled_moments([(nt, mean[arm], float(g.loc[arm, "m2"])), (nc, mean[ref], float(g.loc[ref, "m2"]))])
            test, p = "mean vs chance", randomization_mean_p(nt, mean[arm], nc, mean[ref],
                                                                     sample_variance(pair[0], pair[2]))
        if min(nt, nc) < MIN_ARM_UNITS:
            out.append(_Row(**base, smd=d, vr=vr, chance=chance, test="-", p=None,  # type: ignore[arg-type]
                            note=f"too few units to judge (< {MIN_ARM_UNITS} with a value in an arm)"))
            continue
        out.append(_Row(**base, smd=d, vr=vr, chance=chance, test=test, p=p))  # type: ignore[arg-type]
    if not binary and not constant and min(n.values()) >= MIN_ARM_UNITS:
        p_rank = kruskal_from_ranks(np.array([n[a] for a in arms]),
                                    np.array([float(g.loc[a, "rank_sum"]) for a in arms]), float(g["ties"].iloc[0]))
        out.append(_Row(covariate=cov, level="(ranks, all arms)", arm=",".join(others), ref=None, value=None,
                        smd=None, vr=None, chance=None, test="rank-sum", p=p_rank))
    return out


def _categorical_rows(cov: str, frame: pd.DataFrame, ref: str, others: list[str]) -> list[_Row]:
    counts = frame[[ref, *others]].to_numpy(dtype=np.float64)
    totals = counts.sum(axis=0)
    out: list[_Row] = []
    for arm_i, arm in enumerate(others, start=1):
        for level, row in zip(frame.index, counts):
            pc_ = row[0] / totals[0] if totals[0] else math.nan
            pt = row[arm_i] / totals[arm_i] if totals[arm_i] else math.nan
            chance = smd_chance_se(int(totals[arm_i]), int(totals[0])) if min(totals[0], totals[arm_i]) > 0 else None
            out.append(_Row(covariate=cov, level=str(level), arm=arm, ref=pc_, value=pt, smd=smd_binary(pt, pc_),
                            vr=None, chance=chance, test="-", p=None))
    if totals.min() < MIN_ARM_UNITS:
        out.append(_Row(covariate=cov, level="(all levels)", arm=",".join(others), ref=None, value=None, smd=None,
                        vr=None, chance=None, test="-", p=None,
                        note=f"too few units to judge (< {MIN_ARM_UNITS} in an arm)"))
    else:
        out.append(_Row(covariate=cov, level="(all levels)", arm=",".join(others), ref=None, value=None, smd=None,
                        vr=None, chance=None, test="chi-square",
                        p=chi2_independence_p(pool_rare_levels(counts))))
    return out


def check_balance(spec: Spec, bt: BalanceTables) -> Check:
    """Each arm against the (first) holdout arm, per covariate (categoricals per level).

    Status: the split is judged against what random allocation produces at this sample size. Every
    test (mean difference against its randomization spread, rank-sum across arms, chi-square or
    Fisher for binary and categorical covariates) enters one Holm family; a Holm-adjusted p below
    `balance_p` warns, and fails when the same covariate's |SMD| also exceeds `smd_fail` (and, for a
    numeric covariate, its rank test agrees). SMD and variance ratio are shown, with the SMD's chance
    size sqrt(1/n_T + 1/n_C) beside it; the fixed lines of matched observational studies no longer
    set the status on their own.
    """
    th = spec.audit.thresholds
    ref = _reference(spec)
    arms = list(spec.arm_names)
    others = [a for a in arms if a != ref]
    rows: list[_Row] = []
    for cov, grp in bt.numeric.groupby("covariate", sort=False):
        rows += _numeric_rows(str(cov), grp.set_index("arm"), ref, others, arms)
    for cov, frame in bt.categorical.items():
        rows += _categorical_rows(cov, frame, ref, others)
    if not rows:
        return Check(id="balance", title="Covariate balance", status="skipped",
                     summary="No covariates are configured ([audit] covariates, categorical_covariates).",
                     reason="no covariates configured")
    # A statistic is compared only when it is a number: None (not computed) and NaN (undefined)
    # never count as "no difference"; a p-value that underflows to 0 is the strongest evidence, and
    # an infinite SMD (two constant arms that differ) the largest difference.
    tested = [r for r in rows if r.p is not None and not math.isnan(r.p)]
    adj = holm([r.p for r in tested])  # type: ignore[misc]
    for r, a in zip(tested, adj):
        r.p_holm = float(a)
    invalid = int(bt.numeric["invalid"].sum()) if "invalid" in bt.numeric else 0
    smd_rows = [r for r in rows if r.smd is not None and not math.isnan(r.smd)]
    worst = max(smd_rows, key=lambda r: abs(r.smd), default=None)  # type: ignore[arg-type]
    max_smd = abs(worst.smd) if worst and worst.smd is not None else 0.0
    name = (worst.covariate + (f"={worst.level}" if worst.level else "")) if worst else "-"
    sig = [r for r in tested if r.p_holm is not None and r.p_holm < th.balance_p]
    sig_covs = {r.covariate for r in sig}
    rank_sig = {r.covariate for r in sig if r.test.startswith("rank")}
    has_rank = {r.covariate for r in tested if r.test.startswith("rank")}
    overflow = {r.covariate for r in rows if r.note == OVERFLOW_NOTE}

    def big(r: _Row) -> bool:
        return r.smd is not None and not math.isnan(r.smd) and abs(r.smd) > th.smd_fail

    fail_rows = [r for r in rows if r.covariate in sig_covs and big(r)
                 and (r.covariate not in has_rank or r.covariate in rank_sig)
                 and not r.note]
    # a covariate too large to sum whose ranks differ beyond chance: as broken as a large SMD
    fail_rows += [r for r in sig if r.covariate in overflow and r.covariate in rank_sig]
    judged = {r.covariate for r in tested if r.covariate not in overflow}
    unjudged = sorted({r.covariate for r in rows if r.note.startswith("too few")} - judged)
    untestable = sorted({f"{r.covariate} ({r.note.split(':')[0]})" for r in rows
                         if r.note and not r.note.startswith("too few") and not r.note.startswith("constant")})
    constant = sorted({r.covariate for r in rows if r.note.startswith("constant")})
    status: Status
    extra = ""
    if untestable:
        extra += " Not tested: " + ", ".join(untestable) + "."
    if constant:
        extra += " Constant in every arm (alike by construction): " + ", ".join(constant) + "."
    if invalid:
        extra += f" {invalid} covariate value(s) were +/-infinity and were left out (invalid input)."
    if not tested:
        status = "warn"
        small = min((int(v) for v in bt.numeric["n"]), default=0) if len(bt.numeric) else 0
        summary = ("Cannot judge: too few units to tell a real difference from chance "
                   f"(fewer than {MIN_ARM_UNITS} units with a value in an arm"
                   + (f"; smallest arm has {small}" if len(bt.numeric) else "") + ")." + extra)
    elif fail_rows:
        status = "fail"
        r = max(fail_rows, key=lambda r: abs(r.smd) if r.smd is not None else math.inf)
        p_min = min(x.p_holm for x in sig if x.covariate == r.covariate and x.p_holm is not None)
        size = (f"has SMD {r.smd:.3f} (chance alone gives about +/-{r.chance or 0:.3f})" if r.smd is not None
                else "has values too large to sum, and its ranks differ")
        summary = (f"Arms differ before the test far beyond chance: {r.covariate}"
                   + (f"={r.level}" if r.level and r.smd is not None else "") + f" {size}, Holm p {p_min:.2g}; "
                   "check how units enter the arms (pre-period data joined by arm, a filter applied to one arm) "
                   "before reading any result." + extra)
    elif sig:
        status = "warn"
        r = min(sig, key=lambda r: r.p_holm if r.p_holm is not None else 1.0)
        size = (f" (largest |SMD| {max_smd:.3f} on {name}"
                + ("; small in size" if max_smd <= th.smd_warn else "") + ")")
        summary = (f"Arms differ before the test by more than chance allows on {', '.join(sorted(sig_covs))} "
                   f"(Holm p {r.p_holm:.2g}, {r.test}){size}: check how units enter the arms; adjust the readout "
                   "for the covariate (e.g. CUPED) only once the cause is known." + extra)
    elif unjudged or untestable:
        # some covariates could not be judged: never a pass (issue #20's one status rule)
        status = "warn"
        summary = ("Could not judge every covariate: "
                   + ", ".join([*unjudged, *untestable]) + (" (too few units to judge)" if unjudged and not untestable
                                                            else "")
                   + f". The others differ by no more than chance allows (largest |SMD| {max_smd:.3f}, {name})."
                   + extra)
    else:
        status = "pass"
        summary = (f"Arms differ on no covariate by more than chance allows at this size (largest |SMD| {max_smd:.3f}, "
                   f"{name}; chance alone gives about +/-{(worst.chance if worst and worst.chance else 0):.3f})."
                   + extra)

    def fmt(x: object) -> object:
        if x is None:
            return None
        if isinstance(x, float) and not math.isfinite(x):
            return None if math.isnan(x) else ("inf" if x > 0 else "-inf")
        return round(float(x), 6) if isinstance(x, (float, int)) else x

    table = Table(
        title=f"Balance against {ref}",
        columns=["covariate", "level", "arm", f"{ref} mean/share", "arm mean/share", "SMD", "SMD by chance (SE)",
                 "variance ratio", "test", "p", "p (Holm)", "note"],
        rows=[[r.covariate, r.level, r.arm, fmt(r.ref), fmt(r.value), fmt(r.smd), fmt(r.chance), fmt(r.vr), r.test,
               fmt(r.p), fmt(r.p_holm), r.note or None] for r in rows],
    )
    series = [{"covariate": r.covariate, "level": r.level, "smd": float(r.smd),
               "chance": float(r.chance) if r.chance is not None and math.isfinite(r.chance) else None,
               "beyond_chance": bool(r.p_holm is not None and r.p_holm < th.balance_p)}
              for r in rows if r.smd is not None and math.isfinite(r.smd)]
    figs = {
        "max_abs_smd": Figure(label="largest |SMD|", value=round(max_smd, 6), unit="number"),
        "worst_covariate": Figure(label="least balanced covariate", value=name, unit="text"),
        "min_p_holm": Figure(label="smallest Holm-adjusted balance p-value",
                             value=float(min(adj)) if len(adj) else None, unit="p"),
        "smd_chance": Figure(label="|SMD| chance alone gives (1 SE), least balanced covariate",
                             value=round(worst.chance, 6) if worst and worst.chance else None, unit="number"),
    }
    if invalid:
        figs["invalid_values"] = Figure(label="covariate values that were +/-infinity (left out)", value=invalid,
                                        unit="count")
    return Check(id="balance", title="Covariate balance", status=status, summary=summary, figures=figs,
                 tables=[table], series={"smd": series})
