"""One status rule (issue #20): a check that did not run or could not judge is never PASS, and every
output says so in its verdict's first line; the readout is trustworthy only when SRM, integrity and
leakage all judged and none fails."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from armlock.assign import spec_from_dict
from armlock.audit.model import Check, verdict_of
from armlock.audit.render import render
from armlock.audit.report_html import render_html
from armlock.audit.run import run_audit
from armlock.audit.synth import generate, generate_orders, write_logs, write_orders
from armlock.readout.render import RENDERERS as READOUT_RENDERERS
from armlock.readout.report_html import render_html as readout_html
from armlock.readout.run import run_readout

SPEC = spec_from_dict({"name": "rule-test", "salt": "invented-rule-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}]})


def _c(cid: str, status: str, summary: str = "Fine.", reason: str | None = None) -> Check:
    return Check(id=cid, title=cid.upper(), status=status, summary=summary, reason=reason)  # type: ignore[arg-type]


def test_a_check_that_did_not_run_or_judge_is_marked_unjudged() -> None:
    assert not _c("leakage", "skipped", reason="no exposure log given").judged
    assert not _c("srm", "warn", "Cannot judge: too few units.").judged
    assert _c("srm", "warn", "Arms differ a little.").judged and _c("srm", "pass").judged


@pytest.mark.parametrize("statuses, verdict, gate_gaps", [
    ({"srm": "pass", "integrity": "pass", "leakage": "pass", "churn": "pass"}, "pass", []),
    # an optional check not run: named, but the split can still be called healthy
    ({"srm": "pass", "integrity": "pass", "leakage": "pass", "churn": "skipped"}, "pass", []),
    # a gate check not run or not judged: never PASS
    ({"srm": "pass", "integrity": "pass", "leakage": "skipped"}, "warn", ["leakage"]),
    ({"srm": "cannot", "integrity": "pass", "leakage": "pass"}, "warn", ["srm"]),
    ({"srm": "fail", "integrity": "pass", "leakage": "skipped"}, "fail", ["leakage"]),
    ({"churn": "pass"}, "warn", []),  # no gate check at all
])
def test_verdict_of(statuses: dict[str, str], verdict: str, gate_gaps: list[str]) -> None:
    checks = [_c(k, "warn", "Cannot judge: too few units.") if v == "cannot"
              else _c(k, v, reason="not given" if v == "skipped" else None) for k, v in statuses.items()]
    got, missing = verdict_of(checks)
    assert got == verdict and [m.id for m in missing if m.gate] == gate_gaps
    assert {m.id for m in missing} == {k for k, v in statuses.items() if v in ("skipped", "cannot")}


@pytest.fixture(scope="module")
def paths(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    logs = generate(SPEC, units=6_000, days=21, seed=3)
    out = write_logs(logs, tmp_path_factory.mktemp("rule"), "parquet")
    orders = generate_orders(SPEC, logs, days=21, seed=4, uplift=0.3, base_rate=0.08)
    out["orders"] = write_orders(orders, out["visits"].parent, fmt="parquet")
    return out


def test_audit_without_exposures_names_leakage_first_in_every_output(paths: dict[str, Path]) -> None:
    rep = run_audit(SPEC, visits=paths["visits"], identities=paths["identities"])
    assert rep.verdict == "warn" and [m.id for m in rep.not_checked] == ["leakage"]
    text = render(rep, "text").splitlines()
    assert text[1].startswith("verdict: WARN  Could not check: Leakage")
    md = render(rep, "markdown").splitlines()
    assert md[0].startswith("## armlock audit: rule-test — **WARN** (could not check: Leakage")
    data = json.loads(render(rep, "json"))
    assert data["verdict_text"].startswith("Could not check: Leakage") and data["not_checked"][0]["gate"]
    html = render_html(rep)
    assert "Could not check: Leakage" in html.split('class="verdict"', 1)[1][:1500]


def test_audit_with_every_input_passes_and_says_nothing_is_missing(paths: dict[str, Path]) -> None:
    rep = run_audit(SPEC, visits=paths["visits"], exposures=paths["exposures"], identities=paths["identities"])
    assert rep.verdict == "pass" and rep.not_checked == []
    assert rep.verdict_text == "The split looks healthy: no check found a problem."


def test_readout_without_exposures_is_not_trustworthy_in_every_output(paths: dict[str, Path]) -> None:
    rep = run_readout(SPEC, visits=paths["visits"], orders=paths["orders"], identities=paths["identities"])
    assert rep.status == "warn" and rep.trustworthy is False
    assert rep.headline.startswith("NOT TRUSTWORTHY: could not check Leakage")
    assert [m.id for m in rep.not_checked if m.gate] == ["leakage"]
    for fmt in ("text", "markdown"):  # the decision (issue #21) is withheld at the top, naming what was not checked
        lines = READOUT_RENDERERS[fmt](rep).splitlines()
        assert "withheld" in lines[0] and any("could not check Leakage" in line for line in lines[:3]), fmt
    assert "audit gate: WARN, not trustworthy" in READOUT_RENDERERS["text"](rep).splitlines()
    assert json.loads(READOUT_RENDERERS["json"](rep))["trustworthy"] is False
    assert "WARN: not trustworthy" in readout_html(rep)


def test_readout_with_exposures_is_trustworthy(paths: dict[str, Path]) -> None:
    rep = run_readout(SPEC, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"],
                      identities=paths["identities"])
    assert rep.trustworthy is True and not rep.headline.startswith("NOT TRUSTWORTHY")
