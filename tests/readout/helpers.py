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
