"""Balance check calibration: A/A false warn / fail rates and power, from per-run sufficient statistics."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from armlock.assign import spec_from_dict
from armlock.audit.balance import check_balance
from armlock.shared.engine_pandas import numeric_moments
from armlock.shared.tables import NUMERIC_COLUMNS, BalanceTables

DEVICES = np.array([0.58, 0.36, 0.06])
CHANNELS = np.array([0.34, 0.22, 0.16, 0.10, 0.10, 0.08])


def spec_for(holdout_bp: int):  # noqa: ANN201
    return spec_from_dict({"name": "calib", "salt": "s", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": holdout_bp},
                                    {"name": "exposed", "weight": 10_000 - holdout_bp}],
                           "audit": {"covariates": ["pre_orders", "pre_revenue"],
                                     "categorical_covariates": ["device", "landing_channel"]}})


def covariates(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """The synthetic shop's pre-period covariates (audit.synth): zero-inflated orders, log-normal revenue."""
    returning = rng.random(n) < 0.35
    orders = np.where(returning, rng.poisson(0.9, size=n), 0).astype(np.float64)
    revenue = np.round(orders * rng.lognormal(3.7, 0.6, size=n) * rng.uniform(0.8, 1.2, size=n), 2)
    return {"pre_orders": orders, "pre_revenue": revenue,
            "device": rng.choice(3, size=n, p=DEVICES), "landing_channel": rng.choice(6, size=n, p=CHANNELS)}


def tables(cov: dict[str, np.ndarray], arm: np.ndarray) -> BalanceTables:
    """The engine's tables (audit.engine_pandas.numeric_moments) for one split."""
    rows = []
    for name in ("pre_orders", "pre_revenue"):
        for a, r in zip(("holdout", "exposed"), numeric_moments(cov[name], arm, 2)):
            rows.append({"covariate": name, "arm": a, **{c: r[c] for c in NUMERIC_COLUMNS[2:]}})
    return BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS), categorical=_cats(cov, arm))


def _cats(cov: dict[str, np.ndarray], arm: np.ndarray) -> dict[str, pd.DataFrame]:
    cats = {}
    for name, k in (("device", 3), ("landing_channel", 6)):
        flat = np.bincount(cov[name] * 2 + arm, minlength=2 * k).reshape(k, 2)
        cats[name] = pd.DataFrame(flat, index=pd.Index([f"l{i}" for i in range(k)], name="level"),
                                  columns=["holdout", "exposed"])
    return cats


class Population:
    """One drawn population of units, re-split many times: per-split tables from bincounts.

    Re-splitting a fixed population is the randomization distribution itself; the pooled ranks, tie
    term and centred values are computed once, so a split costs a few bincounts. `tables` equals
    the engine's tables to rounding (checked in `self_check`).
    """

    def __init__(self, cov: dict[str, np.ndarray]) -> None:
        self.cov = cov
        self.num = {}
        for name in ("pre_orders", "pre_revenue"):
            x = cov[name]
            centre = float(x.mean())
            _, t = np.unique(x, return_counts=True)
            t = t.astype(np.float64)
            self.num[name] = (centre, x - centre, stats.rankdata(x), float(np.sum(t**3 - t)),
                              bool(np.isin(x, (0.0, 1.0)).all()))

    def tables(self, arm: np.ndarray) -> BalanceTables:
        rows = []
        n = np.bincount(arm, minlength=2)
        for name, (centre, xc, ranks, ties, binary) in self.num.items():
            s1 = np.bincount(arm, xc, minlength=2)
            s2 = np.bincount(arm, xc * xc, minlength=2)
            rs = np.bincount(arm, ranks, minlength=2)
            for i, a in enumerate(("holdout", "exposed")):
                rows.append({"covariate": name, "arm": a, "n": int(n[i]), "missing": 0, "invalid": 0,
                             "mean": centre + s1[i] / n[i], "m2": max(s2[i] - s1[i] ** 2 / n[i], 0.0),
                             "rank_sum": float(rs[i]), "ties": ties, "binary": binary})
        return BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS), categorical=_cats(self.cov, arm))


def self_check(seed: int = 0) -> float:
    """Largest relative difference between the fast tables and the engine's on one split."""
    rng = np.random.default_rng(seed)
    cov = covariates(rng, 20_000)
    arm = (rng.random(20_000) >= 0.1).astype(np.int64)
    a, b = Population(cov).tables(arm).numeric, tables(cov, arm).numeric
    cols = ["n", "mean", "m2", "rank_sum", "ties"]
    return float(np.max(np.abs(a[cols].to_numpy(float) - b[cols].to_numpy(float)) /
                        np.maximum(np.abs(b[cols].to_numpy(float)), 1e-12)))


def run(n: int, holdout_bp: int, runs: int, seed: int, shift_sd: float = 0.0,
        shift_cov: str = "pre_revenue", splits_per_population: int = 20) -> dict[str, float]:
    """Share of runs that warn / fail / cannot judge. A/A: a fresh population every
    `splits_per_population` random splits. `shift_sd` adds that many SDs to the exposed arm's
    `shift_cov` (each run a fresh population, engine tables)."""
    spec = spec_for(holdout_bp)
    rng = np.random.default_rng(seed)
    warn = fail = unjudged = 0
    pop = None
    for i in range(runs):
        if i % splits_per_population == 0 or shift_sd:
            cov = covariates(rng, n)
            pop = Population(cov) if not shift_sd else None
        arm = (rng.random(n) >= holdout_bp / 10_000).astype(np.int64)  # 0 = holdout, 1 = exposed
        if shift_sd:
            x = cov[shift_cov]
            shifted = dict(cov)
            shifted[shift_cov] = x + shift_sd * x.std() * (arm == 1)
            bt = tables(shifted, arm)
        else:
            bt = pop.tables(arm)  # type: ignore[union-attr]
        check = check_balance(spec, bt)
        warn += check.status == "warn" and not check.summary.startswith("Cannot judge")
        unjudged += check.summary.startswith("Cannot judge")
        fail += check.status == "fail"
    return {"warn": warn / runs, "fail": fail / runs, "cannot_judge": unjudged / runs}
