"""Each seeded fault of the synthetic logs is flagged by the right check with the right status; clean data passes."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import Spec, spec_from_dict
from armlock.audit.model import AuditReport
from armlock.audit.render import check_by_id, render
from armlock.audit.run import run_audit
from armlock.audit.synth import FAULTS, generate, write_logs

SPEC = spec_from_dict({"name": "shop-test", "salt": "invented-shop-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 3000}, {"name": "exposed", "weight": 7000}]})

# Expected status of every check per fault; all others pass.
EXPECTED: dict[str, dict[str, str]] = {
    "clean": {},
    "browser_loss": {"srm": "fail", "srm_segments": "fail"},
    "leakage": {"leakage": "fail"},
    "pre_exposure": {"leakage": "fail"},
    "cookie_churn": {"churn": "fail"},
    "imbalance": {"balance": "warn"},
}
CHECKS = ("srm", "srm_segments", "integrity", "leakage", "churn", "balance", "freshness")


def _run(spec: Spec, tmp: Path, fault: str, fmt: str) -> tuple[AuditReport, dict[str, object]]:
    logs = generate(spec, units=40_000, days=56, seed=3, faults=() if fault == "clean" else (fault,))
    paths = write_logs(logs, tmp / fault, fmt)
    rep = run_audit(spec, visits=paths["visits"], exposures=paths["exposures"], identities=paths["identities"])
    return rep, logs.truth


@pytest.fixture(scope="module", params=["clean", *FAULTS])
def audited(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> tuple[str, AuditReport, dict[str, object]]:
    fault = request.param
    fmt = "parquet" if fault in ("clean", "leakage", "imbalance") else "csv"
    rep, truth = _run(SPEC, tmp_path_factory.mktemp("faults"), fault, fmt)
    return fault, rep, truth


def test_each_fault_flagged_by_the_right_check(audited: tuple[str, AuditReport, dict[str, object]]) -> None:
    fault, rep, _ = audited
    got = {c.id: c.status for c in rep.checks}
    want = {c: EXPECTED[fault].get(c, "pass") for c in CHECKS}
    assert got == want
    assert rep.verdict == ("pass" if not EXPECTED[fault] else max(EXPECTED[fault].values(), key=["pass", "warn", "fail"].index))


def test_fault_figures_match_the_seeded_truth(audited: tuple[str, AuditReport, dict[str, object]]) -> None:
    fault, rep, truth = audited
    if fault == "browser_loss":
        worst = check_by_id(rep, "srm_segments").series["worst"][0]
        assert (worst["segment"], worst["value"]) == ("browser_family", "webkit")
        assert check_by_id(rep, "srm_segments").figures["worst"].value == "browser_family=webkit"
    elif fault == "leakage":
        leak = check_by_id(rep, "leakage")
        assert leak.figures["holdout_leak_units"].value == truth["leaked_units"]
        holdout = check_by_id(rep, "srm").tables[0].rows[0][1]
        assert leak.figures["holdout_leak_share"].value == pytest.approx(truth["leaked_units"] / holdout)
        camp = [t for t in leak.tables if t.title == "Holdout exposure by campaign"][0]
        assert [r[0] for r in camp.rows] == ["cart-abandoners"]  # the synth leaks through one campaign
        assert sum(w["holdout_units"] for w in leak.series["weekly"]) >= truth["leaked_units"]
    elif fault == "pre_exposure":
        leak = check_by_id(rep, "leakage")
        assert leak.figures["pre_exposed_units"].value == truth["pre_exposed_units"]
        assert leak.figures["unseen_ids"].value == truth["unseen_ids"]
        assert leak.figures["holdout_leak_units"].value == 0
    elif fault == "cookie_churn":
        churn = check_by_id(rep, "churn")
        assert churn.figures["worst_browser"].value == "webkit"
        rows = {r["browser"]: r for r in churn.series["by_browser"]}
        assert rows["webkit"]["share"] > 0.3 > rows["chromium-based"]["share"]
    elif fault == "imbalance":
        assert check_by_id(rep, "balance").figures["worst_covariate"].value in ("pre_orders", "pre_revenue")
    else:
        leak = check_by_id(rep, "leakage")
        assert leak.figures["holdout_leak_units"].value == 0
        assert 0.5 < leak.figures["exposure_rate_exposed"].value < 0.7  # the synth reaches 60%


def test_reports_render_in_every_format(audited: tuple[str, AuditReport, dict[str, object]]) -> None:
    _, rep, _ = audited
    import json

    data = json.loads(render(rep, "json"))
    assert data["schema"] == "armlock.audit/1"
    assert [c["id"] for c in data["checks"]] == list(CHECKS)
    assert AuditReport.model_validate(data).verdict == rep.verdict
    md = render(rep, "markdown")
    assert md.startswith("## armlock audit: shop-test")
    assert all(c.title in md for c in rep.checks)
    text = render(rep, "text")
    assert f"verdict: {rep.verdict.upper()}" in text


def test_custom_column_names(tmp_path: Path) -> None:
    # A site whose exports name everything differently: the spec maps them, the audit follows.
    spec = spec_from_dict({
        "name": "renamed", "salt": "other-salt", "start": "2026-02-02T00:00:00Z",
        "arms": [{"name": "ctl", "weight": 5000, "role": "holdout"}, {"name": "ads", "weight": 5000, "role": "exposed"}],
        "audit": {"segments": ["Browser", "device", "country", "landing_channel"],
                  "visits": {"unit_id": "VisitorKey", "first_seen": "FirstHit", "arm": "Group",
                             "fingerprint": "", "browser": "Browser"},
                  "exposures": {"unit_id": "vid", "time": "ts", "campaign": "line_item", "kind": "evt",
                                "impression_values": ["imp"], "click_values": ["clk"]},
                  "identities": {"unit_id": "vid", "customer": "acct"}},
    })
    logs = generate(spec, units=8000, days=28, seed=9, faults=("leakage",))
    assert {"VisitorKey", "FirstHit", "Group", "Browser"} <= set(logs.visits.columns)
    assert list(logs.exposures.columns) == ["vid", "ts", "line_item", "evt"]
    paths = write_logs(logs, tmp_path, "csv.gz")
    rep = run_audit(spec, visits=paths["visits"], exposures=paths["exposures"], identities=paths["identities"])
    assert check_by_id(rep, "leakage").status == "fail"
    assert check_by_id(rep, "leakage").figures["holdout_leak_units"].value == logs.truth["leaked_units"]
    assert check_by_id(rep, "srm").status == "pass"
    assert not any("no 'spec_fingerprint'" in n for n in rep.input_notes)


def test_as_of_ignores_later_data_and_says_so(tmp_path: Path) -> None:
    logs = generate(SPEC, units=5000, days=28, seed=1)
    paths = write_logs(logs, tmp_path, "parquet")
    import datetime as dt

    rep = run_audit(SPEC, visits=paths["visits"], exposures=paths["exposures"], as_of=dt.date(2026, 1, 18))
    cutoff = pd.Timestamp("2026-01-19T00:00:00Z")
    n_before = int((logs.visits["first_seen"] < cutoff).sum())
    assert check_by_id(rep, "srm").figures["units"].value == n_before
    assert rep.as_of == "2026-01-18"
    assert any("first seen after the as-of date 2026-01-18 are ignored" in n for n in rep.input_notes)
    assert any("exposure row(s) after the as-of date" in n for n in rep.input_notes)
    assert check_by_id(rep, "srm").series["daily"][-1]["date"] == "2026-01-18"


def test_integrity_recomputes_arms_and_flags_mismatches(tmp_path: Path) -> None:
    logs = generate(SPEC, units=6000, days=14, seed=2)
    v = logs.visits.copy()
    flip = np.zeros(len(v), dtype=bool)
    flip[::100] = True  # 1% of units recorded in the other arm
    arm = v["arm"].astype(str).to_numpy()
    arm[flip] = np.where(arm[flip] == "holdout", "exposed", "holdout")
    v["arm"] = arm
    v.loc[5, "arm"] = "control"  # an arm the spec does not know
    path = tmp_path / "visits.csv"
    v.to_csv(path, index=False)
    rep = run_audit(SPEC, visits=path)
    integ = check_by_id(rep, "integrity")
    assert integ.status == "fail"
    assert integ.figures["mismatches"].value == int(flip.sum()) - (1 if flip[5] else 0)
    assert integ.figures["unknown_arm_units"].value == 1
    assert "control (1)" in integ.summary


@pytest.mark.parametrize("fault,expected", [((), {}), (("leakage",), {"leakage": "fail"}),
                                            (("browser_loss",), {"srm": "fail", "srm_segments": "fail"})])
def test_three_arms(tmp_path: Path, fault: tuple[str, ...], expected: dict[str, str]) -> None:
    spec = spec_from_dict({"name": "three", "salt": "three-arms", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed_a", "weight": 4000},
                                    {"name": "exposed_b", "weight": 4000}]})
    logs = generate(spec, units=30_000, days=42, seed=8, faults=fault)
    paths = write_logs(logs, tmp_path, "parquet")
    rep = run_audit(spec, visits=paths["visits"], exposures=paths["exposures"], identities=paths["identities"])
    assert {c.id: c.status for c in rep.checks} == {c: expected.get(c, "pass") for c in CHECKS}
    assert len(check_by_id(rep, "srm").tables[0].rows) == 3
    # balance compares each exposed arm with the holdout
    assert {r[2] for r in check_by_id(rep, "balance").tables[0].rows if r[1] is None} == {"exposed_a", "exposed_b"}
