"""The clean demo's readout: its interval covers the true incremental revenue set by construction."""

from __future__ import annotations

import json
from pathlib import Path

from armlock.demo import build_demo


def test_clean_demo_interval_covers_the_truth(tmp_path: Path) -> None:
    res = build_demo(tmp_path / "demo", clean=True, units=20_000)
    lo, hi = res.readout_interval
    assert res.readout_status != "fail"
    assert lo is not None and hi is not None and lo <= res.true_incremental_revenue <= hi
    data = json.loads((tmp_path / "demo" / "readout.json").read_text(encoding="utf-8"))
    assert data["schema"] == "armlock.readout/1" and data["settings"]["planned_units"] == 20_000
    assert data["money"]["attributed_revenue"] > data["money"]["incremental_revenue"]["hi"]  # attribution over-credits
