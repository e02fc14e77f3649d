"""Covariate balance: standardized mean differences (Austin 2009), variance ratios, Welch / chi-square with Holm."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from armlock.assign import Spec

from .model import Check, Figure, Status, Table
from .srm import holm
from .tables import BalanceTables


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


def welch_p(n_t: int, m_t: float, v_t: float, n_c: int, m_c: float, v_c: float) -> float:
    """Two-sided Welch t-test p from summary statistics (scipy.stats.ttest_ind_from_stats)."""
    if min(n_t, n_c) < 2 or (v_t == 0 and v_c == 0):
        return 1.0 if m_t == m_c else 0.0
    res = stats.ttest_ind_from_stats(m_t, math.sqrt(v_t), n_t, m_c, math.sqrt(v_c), n_c, equal_var=False)
    return float(res.pvalue)


def chi2_independence_p(table: np.ndarray) -> float:
    """Chi-square test of independence of levels and arms (scipy.stats.chi2_contingency)."""
    t = np.asarray(table, dtype=np.float64)
    t = t[t.sum(axis=1) > 0][:, t.sum(axis=0) > 0]
    if t.shape[0] < 2 or t.shape[1] < 2:
        return 1.0
    return float(stats.chi2_contingency(t, correction=False).pvalue)


def _reference(spec: Spec) -> str:
    return spec.holdout_arms[0]


def check_balance(spec: Spec, bt: BalanceTables) -> Check:
    """Each arm against the (first) holdout arm, per covariate (categoricals per level)."""
    th = spec.audit.thresholds
    ref = _reference(spec)
    others = [a for a in spec.arm_names if a != ref]
    rows: list[dict[str, object]] = []
    pvals: list[float] = []
    for cov, grp in bt.numeric.groupby("covariate", sort=False):
        g = grp.set_index("arm")
        binary = bool(g["binary"].iloc[0])
        mc, vc = float(g.loc[ref, "mean"]), sample_variance(int(g.loc[ref, "n"]), float(g.loc[ref, "m2"]))
        for arm in others:
            nt = int(g.loc[arm, "n"])
            mt, vt = float(g.loc[arm, "mean"]), sample_variance(nt, float(g.loc[arm, "m2"]))
            nc = int(g.loc[ref, "n"])
            if binary:
                d = smd_binary(mt, mc)
                p = chi2_independence_p(np.array([[mt * nt, (1 - mt) * nt], [mc * nc, (1 - mc) * nc]]))
                vr = None
            else:
                d = smd_continuous(mt, vt, mc, vc)
                p = welch_p(nt, mt, vt, nc, mc, vc)
                vr = vt / vc if vc > 0 else math.inf
            rows.append({"covariate": str(cov), "level": None, "arm": arm, "ref": mc, "value": mt,
                         "smd": d, "vr": vr, "p": p, "missing": int(g["missing"].sum()),
                         "kind": "binary" if binary else "continuous"})
            pvals.append(p)
    for cov, frame in bt.categorical.items():
        counts = frame[[ref, *others]].to_numpy(dtype=np.float64)
        p_cov = chi2_independence_p(counts)
        totals = counts.sum(axis=0)
        for arm_i, arm in enumerate(others, start=1):
            for level, row in zip(frame.index, counts):
                pc_ = row[0] / totals[0] if totals[0] else math.nan
                pt = row[arm_i] / totals[arm_i] if totals[arm_i] else math.nan
                rows.append({"covariate": cov, "level": str(level), "arm": arm, "ref": pc_, "value": pt,
                             "smd": smd_binary(pt, pc_), "vr": None, "p": None, "missing": 0,
                             "kind": "level"})
        pvals.append(p_cov)
        rows.append({"covariate": cov, "level": "(all levels)", "arm": ",".join(others), "ref": None,
                     "value": None, "smd": None, "vr": None, "p": p_cov, "missing": 0, "kind": "test"})
    if not rows:
        return Check(id="balance", title="Covariate balance", status="skipped",
                     summary="No covariates are configured ([audit] covariates, categorical_covariates).",
                     reason="no covariates configured")
    adj = holm(pvals)
    it = iter(adj)
    for r in rows:
        r["p_holm"] = float(next(it)) if r["p"] is not None else None
    smds = [abs(float(r["smd"])) for r in rows if r["smd"] is not None and not math.isnan(float(r["smd"]))]  # type: ignore[arg-type]
    max_smd = max(smds, default=0.0)
    vr_bad = [r for r in rows if r["vr"] is not None and not (1 / th.variance_ratio_max <= float(r["vr"]) <= th.variance_ratio_max)]  # type: ignore[arg-type]
    p_bad = [r for r in rows if r["p_holm"] is not None and float(r["p_holm"]) < th.balance_p]  # type: ignore[arg-type]
    worst = max((r for r in rows if r["smd"] is not None and not math.isnan(float(r["smd"]))),  # type: ignore[arg-type]
                key=lambda r: abs(float(r["smd"])), default=None)  # type: ignore[arg-type]
    name = (f"{worst['covariate']}" + (f"={worst['level']}" if worst and worst["level"] else "")) if worst else "-"
    status: Status
    if max_smd > th.smd_fail:
        status = "fail"
    elif max_smd > th.smd_warn or vr_bad or p_bad:
        status = "warn"
    else:
        status = "pass"
    if status == "pass":
        summary = f"Arms look alike on every configured covariate (largest |SMD| {max_smd:.3f}, {name}); nothing to do."
    else:
        why = []
        if max_smd > th.smd_warn:
            why.append(f"|SMD| {max_smd:.3f} on {name}")
        if vr_bad:
            why.append(f"variance ratio {float(vr_bad[0]['vr']):.2f} on {vr_bad[0]['covariate']}")  # type: ignore[arg-type]
        if p_bad:
            why.append(f"Holm p {float(p_bad[0]['p_holm']):.2g} on {p_bad[0]['covariate']}")  # type: ignore[arg-type]
        summary = ("Arms differ before the test on " + "; ".join(why) + ": a random split should not do this at "
                   "this size, so check how units enter the arms (pre-period data joined by arm, a filter applied "
                   "to one arm); adjust the readout for the covariate (e.g. CUPED) only once the cause is known.")

    def fmt(x: object) -> object:
        return None if x is None else (round(float(x), 6) if isinstance(x, (float, int)) else x)  # type: ignore[arg-type]

    table = Table(
        title=f"Balance against {ref}",
        columns=["covariate", "level", "arm", f"{ref} mean/share", "arm mean/share", "SMD", "variance ratio", "p", "p (Holm)"],
        rows=[[r["covariate"], r["level"], r["arm"], fmt(r["ref"]), fmt(r["value"]), fmt(r["smd"]), fmt(r["vr"]),
               fmt(r["p"]), fmt(r["p_holm"])] for r in rows],
    )
    series = [{"covariate": str(r["covariate"]), "level": r["level"], "smd": float(r["smd"])}  # type: ignore[arg-type]
              for r in rows if r["smd"] is not None and not math.isnan(float(r["smd"])) and math.isfinite(float(r["smd"]))]  # type: ignore[arg-type]
    figs = {
        "max_abs_smd": Figure(label="largest |SMD|", value=round(max_smd, 6), unit="number"),
        "worst_covariate": Figure(label="least balanced covariate", value=name, unit="text"),
        "min_p_holm": Figure(label="smallest Holm-adjusted balance p-value",
                             value=float(min(adj)) if len(adj) else None, unit="p"),
    }
    return Check(id="balance", title="Covariate balance", status=status, summary=summary, figures=figs,
                 tables=[table], series={"smd": series})
