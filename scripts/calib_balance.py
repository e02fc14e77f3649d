"""Balance check calibration: A/A false warn / fail rates and power, from per-run sufficient statistics."""

from __future__ import annotations

import numpy as np
import pandas as pd

from armlock.assign import spec_from_dict
from armlock.audit.balance import check_balance
from armlock.audit.engine_pandas import numeric_moments
from armlock.audit.tables import NUMERIC_COLUMNS, BalanceTables

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
    rows = []
    for name in ("pre_orders", "pre_revenue"):
        for a, r in zip(("holdout", "exposed"), numeric_moments(cov[name], arm, 2)):
            rows.append({"covariate": name, "arm": a, **{c: r[c] for c in NUMERIC_COLUMNS[2:]}})
    cats = {}
    for name, k in (("device", 3), ("landing_channel", 6)):
        flat = np.bincount(cov[name] * 2 + arm, minlength=2 * k).reshape(k, 2)
        cats[name] = pd.DataFrame(flat, index=pd.Index([f"l{i}" for i in range(k)], name="level"),
                                  columns=["holdout", "exposed"])
    return BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS), categorical=cats)


def run(n: int, holdout_bp: int, runs: int, seed: int, shift_sd: float = 0.0,
        shift_cov: str = "pre_revenue") -> dict[str, float]:
    """Share of runs that warn / fail; `shift_sd` adds that many SDs to the exposed arm's `shift_cov`."""
    spec = spec_for(holdout_bp)
    rng = np.random.default_rng(seed)
    warn = fail = 0
    for _ in range(runs):
        cov = covariates(rng, n)
        arm = (rng.random(n) >= holdout_bp / 10_000).astype(np.int64)  # 0 = holdout, 1 = exposed
        if shift_sd:
            x = cov[shift_cov]
            cov[shift_cov] = x + shift_sd * x.std() * (arm == 1)
        status = check_balance(spec, tables(cov, arm)).status
        warn += status == "warn"
        fail += status == "fail"
    return {"warn": warn / runs, "fail": fail / runs}
