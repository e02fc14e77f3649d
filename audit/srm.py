"""Sample-ratio mismatch: the anytime-valid multinomial test (verdict), exact and chi-square p-values, Holm."""

from __future__ import annotations

import math

from collections.abc import Sequence

import numpy as np
import pandas as pd
# scipy.stats and scipy.special: imported inside the functions that use them (0.6 s; shared/lazy.py imports them on a thread beside the reading)

from armlock.assign import Spec

from armlock.shared.report import Check, Figure, Status, Table
from armlock.shared.tables import SplitTables

Vector = Sequence[float] | np.ndarray
PRIOR_CONCENTRATION = 100.0  # Dirichlet prior alpha = 100 * theta0 (Lindon & Malek's reference code default)


def chi_square(counts: Vector, theta0: Vector) -> tuple[float, float]:
    """Pearson chi-square goodness of fit of `counts` against shares `theta0`: (statistic, p)."""
    from scipy import stats

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
    from scipy.special import gammaln  # here, not at the top: importing it takes 0.1 s (`shared.lazy`)

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


def binom_two_sided_p(x: Vector, n: Vector, p: Vector) -> np.ndarray:
    """Exact two-sided binomial p, vectorized; equals scipy.stats.binomtest(x, n, p).pvalue.

    Same rule as scipy (the "minlike" method: sum the probabilities of every outcome no more likely
    than the one seen, with scipy's relative tolerance 1e-7); vectorized because the segment check
    and its simulations test many cells.
    """
    from scipy import stats
    x, n, p = np.broadcast_arrays(np.asarray(x, np.int64), np.asarray(n, np.int64), np.asarray(p, np.float64))
    x, n, p = x.ravel(), n.ravel(), p.ravel()
    d = stats.binom.pmf(x, n, p) * (1 + 1e-7)
    mode_lo = np.floor(p * n).astype(np.int64)
    mode_hi = np.ceil(p * n).astype(np.int64)
    below = x < n * p
    # below the mean: the smallest y >= ceil(np) with pmf(y) <= d (pmf falls there); n + 1 if none
    lo, hi = mode_hi.copy(), n + 1
    # above the mean: the smallest y in [0, floor(np) + 1] with pmf(y) > d (pmf rises there)
    lo2, hi2 = np.zeros_like(n), mode_lo + 1
    for _ in range(70):
        if not ((lo < hi).any() or (lo2 < hi2).any()):
            break
        mid = (lo + hi) // 2
        cond = stats.binom.pmf(mid, n, p) <= d
        go = lo < hi
        hi = np.where(go & cond, mid, hi)
        lo = np.where(go & ~cond, mid + 1, lo)
        mid2 = (lo2 + hi2) // 2
        cond2 = stats.binom.pmf(mid2, n, p) > d
        go2 = lo2 < hi2
        hi2 = np.where(go2 & cond2, mid2, hi2)
        lo2 = np.where(go2 & ~cond2, mid2 + 1, lo2)
    p_below = stats.binom.cdf(x, n, p) + stats.binom.sf(lo - 1, n, p)
    p_above = stats.binom.cdf(lo2 - 1, n, p) + stats.binom.sf(x - 1, n, p)
    out = np.where(below, p_below, p_above)
    out = np.where(x == n * p, 1.0, out)
    return np.minimum(out, 1.0)


def exact_srm_p(counts: np.ndarray, theta0: Vector) -> np.ndarray:
    """Exact SRM p per row of counts: the binomial test for two arms; for more arms, each arm against the
    rest by the exact binomial test with a Bonferroni factor k (valid at any size, slightly conservative).

    `counts` is (..., k); returns shape (...).
    """
    x = np.asarray(counts, dtype=np.int64)
    th = np.asarray(theta0, dtype=np.float64)
    th = th / th.sum()
    n = x.sum(axis=-1)
    if x.shape[-1] == 2:
        return binom_two_sided_p(x[..., 0], n, th[0]).reshape(n.shape)
    per_arm = np.stack([binom_two_sided_p(x[..., i], n, th[i]).reshape(n.shape) for i in range(x.shape[-1])], axis=-1)
    return np.minimum(1.0, per_arm.min(axis=-1) * x.shape[-1])


def fixed_p(counts: np.ndarray, theta0: Vector, min_expected: float = 5.0) -> tuple[float, str]:
    """This look's fixed-horizon p: chi-square when every arm expects at least `min_expected` units
    (Cochran's rule, common practice), else exact (`exact_srm_p`); returns (p, method)."""
    x = np.asarray(counts, dtype=np.float64)
    th = np.asarray(theta0, dtype=np.float64) / np.sum(theta0)
    if (x.sum() * th).min() >= min_expected:
        return chi_square(x, th)[1], "chi-square"
    return float(exact_srm_p(np.asarray(counts, np.int64), th)), "exact"


def detectable_shortfall(n: int, theta0: Vector, alpha: float,
                         concentration: float = PRIOR_CONCENTRATION) -> tuple[float, float] | None:
    """How much mismatch the anytime-valid test can see at n units, in the smallest arm's share.

    Returns (half, reliable): the relative shortfall of the smallest arm's share (others scaled up
    in proportion) at which the expected counts sit exactly on the failing line (caught about half
    the time), and that plus 2.33 binomial standard errors (caught about 99% of the time). None when
    even an empty smallest arm would not cross the line at this size.
    """
    th = np.asarray(theta0, dtype=np.float64) / np.sum(theta0)
    s = int(np.argmin(th))
    target = np.log(1 / alpha)
    others = np.arange(len(th)) != s

    def lbf(delta: float) -> float:
        c = n * th.copy()
        c[s] = n * th[s] * (1 - delta)
        c[others] = n * th[others] * (1 + delta * th[s] / (1 - th[s]))
        return float(log_bayes_factor(c, th, concentration)) - target

    if n <= 0 or lbf(1.0) < 0:
        return None
    from scipy.optimize import brentq

    half = brentq(lbf, 0.0, 1.0, xtol=1e-6) if lbf(0.0) < 0 else 0.0
    se_rel = float(np.sqrt((1 - th[s]) / (n * th[s])))
    return float(half), float(min(1.0, half + 2.326 * se_rel))


def _theta(spec: Spec) -> np.ndarray:
    return np.array(spec.weights, dtype=np.float64) / 10_000


def check_srm(spec: Spec, split: SplitTables) -> Check:
    """Overall SRM. The verdict rests on the anytime-valid test (valid at every weekly look and at any
    size); the fixed-horizon p of this look alone is information (it would false-alarm about ten
    times its level if judged at each of 26 weekly audits)."""
    th = spec.audit.thresholds
    arms = split.arms
    counts = np.array([split.units[a] for a in arms])
    n = int(counts.sum())
    theta = _theta(spec)
    if n == 0:
        return Check(id="srm", title="Sample ratio (SRM), overall", status="warn",
                     summary="Cannot judge: no units with a known recorded arm, so there is nothing to count.")
    stat, _ = chi_square(counts, theta)
    p_fixed, method = fixed_p(counts, theta, th.min_expected)
    cum = split.daily[arms].to_numpy().cumsum(axis=0)
    p_any_path = sequential_p(cum, theta)
    p_any = float(p_any_path[-1])
    daily_fixed = [fixed_p(row, theta, th.min_expected)[0] for row in cum]
    if not math.isfinite(p_any):  # a p-value that is not a number never reads as "within chance"
        return Check(id="srm", title="Sample ratio (SRM), overall", status="warn",
                     summary=f"Cannot judge: the sequential test gave no p-value for these counts "
                             f"({', '.join(f'{a} {int(c):,}' for a, c in zip(arms, counts))}); check the counts.")
    failed = p_any < th.srm_anytime_p
    shares = counts / n
    worst = int(np.argmax(np.abs(shares - theta) / theta))
    small = int(np.argmin(theta))
    seen = detectable_shortfall(n, theta, th.srm_anytime_p)
    status: Status
    if failed:
        status = "fail"
        summary = (f"The split is off: {arms[worst]} has {shares[worst]:.2%} of units where the spec "
                   f"says {theta[worst]:.2%}, beyond chance even allowing for weekly looks (anytime-valid p "
                   f"{p_any:.2g}); every metric of this test is suspect until the cause "
                   "(a tag failing in one arm, a bot filter, a redirect) is found; see SRM by segment.")
    elif seen is None:
        status = "warn"
        summary = (f"Cannot judge: {n:,} units are too few for the test to notice even an empty {arms[small]} "
                   f"arm (expected {theta[small] * n:.1f} units); run the audit again when more units arrive.")
    else:
        status = "pass"
        half, reliable = seen
        summary = (f"Units per arm are within chance (anytime-valid p {p_any:.2g}, allowing for weekly looks). "
                   f"At {n:,} units this check catches {arms[small]}'s share falling {reliable:.1%} short of its "
                   f"{theta[small]:.1%} weight (to {theta[small] * (1 - reliable):.2%}) 99% of the time, and half the "
                   f"time at {half:.1%} short; a smaller mismatch can pass unnoticed.")
    table = Table(title="Units per arm", columns=["arm", "units", "share", "expected share", "expected units"],
                  rows=[[a, int(c), round(float(s), 6), round(float(t), 6), round(float(t * n), 1)]
                        for a, c, s, t in zip(arms, counts, shares, theta)])
    series = [{"date": d, "counts": {a: int(x) for a, x in zip(arms, row)},
               "p_fixed": float(pf), "p_anytime": float(pa)}
              for d, row, pf, pa in zip(split.daily.index, cum, daily_fixed, p_any_path)]
    figs = {
        "units": Figure(label="units", value=n, unit="count"),
        "chi2": Figure(label="chi-square statistic", value=round(stat, 4), unit="number"),
        "p_fixed": Figure(label=f"fixed-horizon SRM p-value, this look alone ({method}; information only)",
                          value=p_fixed, unit="p"),
        "p_anytime": Figure(label="anytime-valid SRM p-value (sets the status)", value=p_any, unit="p"),
        "worst_arm_ratio": Figure(label=f"{arms[worst]} share / expected", value=round(float(shares[worst] / theta[worst]), 6), unit="ratio"),
    }
    if seen is not None:
        figs["detectable_shortfall"] = Figure(
            label=f"shortfall of {arms[small]}'s share caught 99% of the time at this size", value=round(seen[1], 6),
            unit="share")
    return Check(id="srm", title="Sample ratio (SRM), overall", status=status,
                 summary=summary, figures=figs, tables=[table], series={"daily": series})


def look_weeks(split: SplitTables) -> int:
    """The test week this audit looks at: whole or begun weeks from the first to the last first-seen day."""
    if not len(split.daily):
        return 1
    days = pd.to_datetime(pd.Index(split.daily.index).astype(str), errors="coerce")
    if days.isna().any():
        return 1
    return max(1, -(-((days.max() - days.min()).days + 1) // 7))


def check_srm_segments(spec: Spec, split: SplitTables, *, show: int = 10) -> Check:
    """SRM per first-seen day and per segment value: exact per-cell p-values, Holm-corrected across all of them.

    Exact p-values (`exact_srm_p`) keep the family-wise error at or below its level at every cell
    size; chi-square p-values at Holm's tiny thresholds are too small in cells of a few units.
    Weekly looks: the audit of test week k (`look_weeks`) fails below `srm_p / k`, so 26 weekly
    audits together false-fail with probability at most srm_p x (1 + 1/2 + ... + 1/26) = 3.9 x srm_p
    (union bound); at `srm_p` in every week it was up to 26 x, 0.5% measured at 200,000 units.
    """
    th = spec.audit.thresholds
    level = th.srm_p / look_weeks(split)
    arms = split.arms
    theta = _theta(spec)
    tests: list[tuple[str, str, int, float, float]] = []  # segment, value, units, ratio, p
    skipped = 0
    frames = {"first_seen_day": split.daily, **split.segments}
    for seg, frame in frames.items():
        x = frame[arms].to_numpy()
        tot = x.sum(axis=1)
        keep = (tot > 0) & ((tot[:, None] * theta[None, :]).min(axis=1) >= th.min_expected)
        skipped += int(((tot > 0) & ~keep).sum())
        if not keep.any():
            continue
        ps = exact_srm_p(x[keep], theta)
        for value, row, n, p in zip(frame.index[keep], x[keep], tot[keep], ps):
            worst = np.max(np.abs(row / n / theta - 1))
            tests.append((seg, str(value), int(n), float(worst), float(p)))
    if not tests:
        return Check(id="srm_segments", title="Sample ratio by day and segment", status="warn",
                     summary=(f"Cannot judge: no day or segment value has {th.min_expected:g} or more expected units "
                              "in every arm yet."))
    adj = holm([t[4] for t in tests])
    order = np.lexsort((np.array([t[4] for t in tests]), adj))  # by adjusted p, ties by raw p
    fails = [i for i in order if adj[i] < level]
    listed = [i for i in order if adj[i] < 1.0][:show]  # an adjusted p of 1 is no lead: not listed
    rows = [[tests[i][0], tests[i][1], tests[i][2], round(tests[i][3], 4), tests[i][4], float(adj[i])]
            for i in listed]
    worst_rows = [{"segment": tests[i][0], "value": tests[i][1], "p": tests[i][4], "p_holm": float(adj[i])}
                  for i in listed]
    named = ", ".join(f"{tests[i][0]}={tests[i][1]}" for i in fails[:5])
    status: Status
    if fails:
        status = "fail"
        summary = (f"The split is off in {len(fails)} day(s)/segment value(s), worst {named}: look for a tag "
                   "or page that fails there for one arm (browser-specific script errors are the usual cause).")
    else:
        status = "pass"
        summary = (f"No day or segment value has a sample ratio mismatch beyond chance ({len(tests)} tested with exact "
                   f"p-values, Holm-corrected, failing below {level:.2g}: the level {th.srm_p:g} shared over "
                   f"{look_weeks(split)} weekly look(s)"
                   + (f"; {skipped} too small to test" if skipped else "") + ").")
    by_segment = {}
    for seg, frame in split.segments.items():
        by_segment[seg] = [[str(v), *[int(c) for c in frame.loc[v, arms]]] for v in frame.index]
    tables = [Table(title="Worst days and segment values (Holm-adjusted p below 1, smallest first)",
                    columns=["segment", "value", "units", "max |share/expected - 1|", "p (exact)", "p (Holm)"], rows=rows)]
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
