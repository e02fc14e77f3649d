"""The readout end to end on the invented shop's logs with a known true effect; the audit gate; the scale check."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from armlock.assign import spec_from_dict
from armlock.audit import synth
from armlock.readout.model import SCHEMA
from armlock.readout.money import money
from armlock.readout.render import RENDERERS
from armlock.readout.run import run_readout
from armlock.readout.stats import welch
from armlock.shared.readout_tables import Moments

DAYS = 56


def _spec(**readout: object):
    return spec_from_dict({"name": "shop", "salt": "readout-run-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}],
                           "readout": {"orders": {"attributed": "attributed_channel"}, **readout}})


def _files(tmp: Path, spec, faults=(), seed=5, uplift=0.5, units=30_000):
    logs = synth.generate(spec, units=units, days=DAYS, seed=seed, faults=faults)
    orders = synth.generate_orders(spec, logs, days=DAYS, seed=seed + 1, uplift=uplift, base_rate=0.08)
    paths = synth.write_logs(logs, tmp, fmt="parquet")
    paths["orders"] = synth.write_orders(orders, tmp, fmt="parquet")
    return paths, orders.truth


def test_clean_test_interval_covers_the_true_effect(tmp_path: Path) -> None:
    spec = _spec()
    paths, truth = _files(tmp_path, spec)
    rep = run_readout(spec, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"],
                      identities=paths["identities"], spend=10_000.0)
    assert rep.status in ("pass", "warn") and rep.trustworthy
    inc = rep.money.incremental_revenue
    assert inc.lo <= truth["incremental_revenue"] <= inc.hi
    assert inc.anytime_lo <= inc.lo and inc.anytime_hi >= inc.hi
    assert rep.money.attributed_revenue == pytest.approx(truth["attributed_revenue"], rel=0.1)
    assert rep.money.iroas.value == pytest.approx(inc.value / 10_000.0)
    assert rep.money.roi.value == pytest.approx(rep.money.margin * inc.value / 10_000.0 - 1)
    assert rep.money.attributed_roas == pytest.approx(rep.money.attributed_revenue / 10_000.0)
    assert rep.exposure and 0.5 < rep.exposure[0].exposure_rate_exposed < 0.7
    assert rep.exposure[0].exposure_rate_holdout == 0
    assert rep.looks[-1].date == rep.as_of and len(rep.looks) == DAYS // 7
    assert rep.adjustment is not None and rep.adjustment.primary == "CUPED"
    assert "refund row(s)" in " ".join(rep.input_notes)


def test_failing_audit_gates_the_headline(tmp_path: Path) -> None:
    spec = _spec()
    paths, _ = _files(tmp_path, spec, faults=("leakage",), units=20_000)
    rep = run_readout(spec, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"], spend=5_000.0)
    assert rep.status == "fail" and not rep.trustworthy
    assert rep.headline.startswith("NOT TRUSTWORTHY") and "Leakage" in rep.headline
    assert any(g.id == "leakage" and g.status == "fail" for g in rep.gate)
    assert rep.exposure[0].exposure_rate_holdout > 0.01  # two-sided non-compliance
    assert any("two-sided non-compliance" in c for c in rep.cautions)
    text = RENDERERS["text"](rep)
    assert "[FAIL] Leakage" in text


def test_json_has_the_versioned_schema(tmp_path: Path) -> None:
    import json

    spec = _spec()
    paths, _ = _files(tmp_path, spec, units=5_000)
    rep = run_readout(spec, visits=paths["visits"], orders=paths["orders"])
    data = json.loads(RENDERERS["json"](rep))
    assert data["schema"] == SCHEMA == "armlock.readout/1"
    assert data["status"] in ("pass", "warn", "fail")
    assert {"arms", "effects", "money", "looks", "gate", "headline", "settings"} <= set(data)
    assert data["money"]["iroas"] is None  # no spend given
    assert any("No spend was given" in c for c in data["cautions"])


def test_lewis_rao_stylized_roi_interval_width() -> None:
    # Lewis & Rao 2015, "The Unfavorable Economics of Measuring the Returns to Advertising", QJE
    # 130(4), stylized numbers as given by Salganik 2018 (Bit by Bit, Ch. 4; SECONDARY, REFERENCES
    # §7): mean sales $7, SD $75, cost $0.14 per customer, 50% margin, 100,000 per arm -> the 95%
    # interval on ROI is about +/-235 percentage points. Normal draws: at this n only the mean and
    # SD matter for the width, and a normal sample's SD is stable.
    rng = np.random.default_rng(2015)
    n = 100_000
    a = Moments.of(("revenue",), rng.normal(7.0, 75.0, n))
    b = Moments.of(("revenue",), rng.normal(7.0, 75.0, n))
    diff = welch(a, b, "revenue")
    buyers = welch(a, b, "revenue")  # not used for ROI
    m = money(revenue_per_unit=diff, buyers_per_unit=buyers, exposed_units=n, margin=0.5, spend=0.14 * n, attributed=None)
    half = (m.roi.hi - m.roi.lo) / 2
    assert half == pytest.approx(2.35, rel=0.03)


@pytest.mark.parametrize("fmt", ["text", "markdown"])
def test_text_reports_say_which_interval_to_read_weekly(tmp_path: Path, fmt: str) -> None:
    spec = _spec(planned_units=5_000)
    paths, _ = _files(tmp_path, spec, units=5_000)
    rep = run_readout(spec, visits=paths["visits"], orders=paths["orders"], spend=1_000.0)
    out = RENDERERS[fmt](rep)
    assert "anytime interval" in out and "every week" in out
    assert not any("planned_units is not set" in c for c in rep.cautions)
