"""Sample-ratio mismatch: chi-square goodness of fit, the anytime-valid multinomial test, Holm; and their verdicts."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats
from scipy.special import gammaln

from armlock.assign import Spec

from .model import Check, Figure, Status, Table
from .tables import SplitTables

Vector = Sequence[float] | np.ndarray
PRIOR_CONCENTRATION = 100.0  # Dirichlet prior alpha = 100 * theta0 (Lindon & Malek's reference code default)


def chi_square(counts: Vector, theta0: Vector) -> tuple[float, float]:
    """Pearson chi-square goodness of fit of `counts` against shares `theta0`: (statistic, p)."""
    x = np.asarray(counts, dtype=np.float64)
    th = np.asarray(theta0, dtype=np.float64)
    n = x.sum()
    if n <= 0:
        return 0.0, 1.0
    res = stats.chisquare(x, f_exp=n * th / th.sum())
    return float(res.statistic), float(res.pvalue)


def log_bayes_factor(counts: np.ndarray, theta0: Vector,
                     concentration: float = PRIOR_CONCENTRATION) -> np.ndarray:
    """log BF of Dirichlet-multinomial (alpha = c * theta0) over the null multinomial, per row of counts.

    log BF = lnG(A) - lnG(A+n) + sum_i [lnG(a_i+x_i) - lnG(a_i)] - sum_i x_i ln theta0_i
    (Lindon & Malek 2022, NeurIPS, "Anytime-Valid Inference for Multinomial Count Data").
    `counts` is (..., d); returns shape (...).
    """
    x = np.asarray(counts, dtype=np.float64)
    th = np.asarray(theta0, dtype=np.float64)
    th = th / th.sum()
    alpha = concentration * th
    a_sum = alpha.sum()
    n = x.sum(axis=-1)
    return (gammaln(a_sum) - gammaln(a_sum + n)
            + (gammaln(alpha + x) - gammaln(alpha)).sum(axis=-1)
            - (x * np.log(th)).sum(axis=-1))


def sequential_p(cumulative: np.ndarray, theta0: Vector,
                 concentration: float = PRIOR_CONCENTRATION) -> np.ndarray:
    """Anytime-valid p-value after each look: running minimum of min(1, 1/BF) over the looks.

    `cumulative` is (looks, d) (or (..., looks, d)): cumulative counts per arm at each look.
    Valid under continuous monitoring by Ville's inequality on the test martingale BF.
    """
    lbf = log_bayes_factor(cumulative, theta0, concentration)
    p = np.minimum(1.0, np.exp(-lbf))
    return np.minimum.accumulate(p, axis=-1)


def holm(p: Vector) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values (family-wise error control), in input order."""
    pv = np.asarray(p, dtype=np.float64)
    m = len(pv)
    if m == 0:
        return pv
    order = np.argsort(pv, kind="stable")
    adj = np.maximum.accumulate((m - np.arange(m)) * pv[order])
    out = np.empty(m)
    out[order] = np.minimum(adj, 1.0)
    return out


def _theta(spec: Spec) -> np.ndarray:
    return np.array(spec.weights, dtype=np.float64) / 10_000


def check_srm(spec: Spec, split: SplitTables) -> Check:
    """Overall SRM: fixed-horizon chi-square and the anytime-valid test over daily cumulative counts."""
    th = spec.audit.thresholds
    arms = split.arms
    counts = np.array([split.units[a] for a in arms])
    n = int(counts.sum())
    theta = _theta(spec)
    if n == 0:
        return Check(id="srm", title="Sample ratio (SRM), overall", status="skipped",
                     summary="No units with a known recorded arm: nothing to test.",
                     reason="no units with a known recorded arm")
    stat, p_fixed = chi_square(counts, theta)
    cum = split.daily[arms].to_numpy().cumsum(axis=0)
    p_any_path = sequential_p(cum, theta)
    p_any = float(p_any_path[-1])
    daily_fixed = [chi_square(row, theta)[1] for row in cum]
    failed = p_fixed < th.srm_p or p_any < th.srm_anytime_p
    shares = counts / n
    worst = int(np.argmax(np.abs(shares - theta) / theta))
    if failed:
        summary = (f"The split is off: {arms[worst]} has {shares[worst]:.2%} of units where the spec "
                   f"says {theta[worst]:.2%}; every metric of this test is suspect until the cause "
                   "(a tag failing in one arm, a bot filter, a redirect) is found; see SRM by segment.")
    else:
        summary = ("Units per arm match the spec's weights within chance; nothing to do.")
    table = Table(title="Units per arm", columns=["arm", "units", "share", "expected share", "expected units"],
                  rows=[[a, int(c), round(float(s), 6), round(float(t), 6), round(float(t * n), 1)]
                        for a, c, s, t in zip(arms, counts, shares, theta)])
    series = [{"date": d, "counts": {a: int(x) for a, x in zip(arms, row)},
               "p_fixed": float(pf), "p_anytime": float(pa)}
              for d, row, pf, pa in zip(split.daily.index, cum, daily_fixed, p_any_path)]
    figs = {
        "units": Figure(label="units", value=n, unit="count"),
        "chi2": Figure(label="chi-square statistic", value=round(stat, 4), unit="number"),
        "p_fixed": Figure(label="fixed-horizon SRM p-value", value=p_fixed, unit="p"),
        "p_anytime": Figure(label="anytime-valid SRM p-value", value=p_any, unit="p"),
        "worst_arm_ratio": Figure(label=f"{arms[worst]} share / expected", value=round(float(shares[worst] / theta[worst]), 6), unit="ratio"),
    }
    return Check(id="srm", title="Sample ratio (SRM), overall", status="fail" if failed else "pass",
                 summary=summary, figures=figs, tables=[table], series={"daily": series})


def check_srm_segments(spec: Spec, split: SplitTables, *, show: int = 10) -> Check:
    """SRM per first-seen day and per segment value, Holm-corrected across all of them."""
    th = spec.audit.thresholds
    arms = split.arms
    theta = _theta(spec)
    tests: list[tuple[str, str, int, float, float]] = []  # segment, value, units, ratio, p
    skipped = 0
    frames = {"first_seen_day": split.daily, **split.segments}
    for seg, frame in frames.items():
        x = frame[arms].to_numpy()
        tot = x.sum(axis=1)
        for value, row, n in zip(frame.index, x, tot):
            if n == 0:
                continue
            if (n * theta).min() < th.min_expected:
                skipped += 1
                continue
            p = chi_square(row, theta)[1]
            shares = row / n
            worst = np.max(np.abs(shares / theta - 1))
            tests.append((seg, str(value), int(n), float(worst), p))
    if not tests:
        return Check(id="srm_segments", title="Sample ratio by day and segment", status="skipped",
                     summary="No day or segment value is large enough to test.",
                     reason=f"every value has fewer than {th.min_expected:g} expected units in some arm")
    adj = holm([t[4] for t in tests])
    order = np.argsort(adj, kind="stable")
    fails = [i for i in order if adj[i] < th.srm_p]
    rows = [[tests[i][0], tests[i][1], tests[i][2], round(tests[i][3], 4), tests[i][4], float(adj[i])]
            for i in order[:show]]
    worst_rows = [{"segment": tests[i][0], "value": tests[i][1], "p": tests[i][4], "p_holm": float(adj[i])}
                  for i in order[:show]]
    named = ", ".join(f"{tests[i][0]}={tests[i][1]}" for i in fails[:5])
    status: Status
    if fails:
        status = "fail"
        summary = (f"The split is off in {len(fails)} day(s)/segment value(s), worst {named}: look for a tag "
                   "or page that fails there for one arm (browser-specific script errors are the usual cause).")
    else:
        status = "pass"
        summary = "No day or segment value has a sample ratio mismatch after Holm correction."
    by_segment = {}
    for seg, frame in split.segments.items():
        by_segment[seg] = [[str(v), *[int(c) for c in frame.loc[v, arms]]] for v in frame.index]
    tables = [Table(title="Worst days and segment values (Holm-adjusted)",
                    columns=["segment", "value", "units", "max |share/expected - 1|", "p", "p (Holm)"], rows=rows)]
    for seg, rws in by_segment.items():
        tables.append(Table(title=f"Units per arm by {seg}", columns=[seg, *arms], rows=rws))
    figs = {
        "tests": Figure(label="days and segment values tested", value=len(tests), unit="count"),
        "failing": Figure(label="days and segment values with SRM", value=len(fails), unit="count"),
        "min_p_holm": Figure(label="smallest Holm-adjusted SRM p-value", value=float(adj.min()), unit="p"),
        "not_tested": Figure(label="values too small to test", value=skipped, unit="count"),
    }
    if fails:
        figs["worst"] = Figure(label="worst segment", value=f"{tests[fails[0]][0]}={tests[fails[0]][1]}", unit="text")
    return Check(id="srm_segments", title="Sample ratio by day and segment", status=status, summary=summary,
                 figures=figs, tables=tables, series={"worst": worst_rows})


def daily_table(split: SplitTables) -> pd.DataFrame:
    """Cumulative units per arm per day (for reports)."""
    return split.daily[split.arms].cumsum()
