"""Small hand-made logs for the readout's tests: every figure can be computed by hand from them."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd

from armlock.assign import Spec, assign_many, spec_from_dict

START = "2026-01-05T00:00:00Z"


def small_spec(**readout: Any) -> Spec:
    return spec_from_dict({"name": "small", "salt": "readout-test-salt", "start": START,
                           "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                           "audit": {"segments": [], "categorical_covariates": [], "covariates": ["pre_revenue"]},
                           "readout": readout})


def visits_frame(spec: Spec, n: int = 40) -> pd.DataFrame:
    """n units first seen one per 12 hours from the start, recorded in their hashed arm."""
    ids = [f"u{i:03d}" for i in range(n)]
    first = pd.Timestamp(START) + pd.to_timedelta([12 * i for i in range(n)], "h")
    return pd.DataFrame({"unit_id": ids, "first_seen": first.strftime("%Y-%m-%dT%H:%M:%SZ"),
                         "arm": assign_many(spec, ids), "pre_revenue": [float(i % 7) * 10 for i in range(n)]})


def write(path: Path, frame: pd.DataFrame) -> Path:
    frame.to_csv(path, index=False)
    return path


def invented_logs(spec: Spec, folder: Path, *, units: int, seed: int, uplift: float,
                  base_rate: float) -> dict[str, Path]:
    """Four weeks of invented logs and orders (audit.synth) as Parquet files; orders use seed + 1."""
    from armlock.audit import synth

    logs = synth.generate(spec, units=units, days=28, seed=seed)
    orders = synth.generate_orders(spec, logs, days=28, seed=seed + 1, uplift=uplift, base_rate=base_rate)
    paths = synth.write_logs(logs, folder, fmt="parquet")
    paths["orders"] = synth.write_orders(orders, folder, fmt="parquet")
    return paths
