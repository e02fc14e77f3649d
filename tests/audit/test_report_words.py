"""One word per state and one way of writing shares in every human output; JSON keeps machine values."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from armlock.assign import spec_from_dict
from armlock.shared.history import row_from_report
from armlock.audit.model import AuditReport
from armlock.audit.render import check_by_id, render
from armlock.audit.report_html import render_html
from armlock.audit.run import run_audit
from armlock.audit.synth import generate, write_logs
from armlock.shared.words import STATUS_WORD, format_figure, shown_figures
from armlock.shared.history_tables import trend_table

SPEC = spec_from_dict({"name": "words-test", "salt": "invented-words-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}]})
OLD_WORDS = ("Healthy", "Needs a look", "Broken", "Not checked", "SKIP", "Skipped")


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> AuditReport:
    """Faults that fail two checks; no identity links, so churn does not run."""
    logs = generate(SPEC, units=20_000, days=28, seed=5, faults=("leakage", "pre_exposure", "browser_loss"))
    paths = write_logs(logs, tmp_path_factory.mktemp("words"), "parquet")
    return run_audit(SPEC, visits=paths["visits"], exposures=paths["exposures"], identities=None)


def test_every_summary_is_a_sentence(report: AuditReport) -> None:
    assert {c.status for c in report.checks} >= {"pass", "fail", "skipped"}
    for c in report.checks:
        assert c.summary[:1].isupper(), (c.id, c.summary)


def test_one_word_per_state_in_text_markdown_html_and_history(report: AuditReport) -> None:
    outputs = {"text": render(report, "text"), "markdown": render(report, "markdown"),
               "html": render_html(report, [dict(row_from_report(report), as_of="2026-01-25")]),
               "history": trend_table([row_from_report(report)])}
    for name, out in outputs.items():
        for old in OLD_WORDS:
            assert old not in out, (name, old)
    assert "[NOT RUN] Identity churn" in outputs["text"] and "[FAIL] Leakage" in outputs["text"]
    assert "**NOT RUN**" in outputs["markdown"] and "**FAIL**" in outputs["markdown"]
    for word in STATUS_WORD.values():  # the HTML legend explains every word
        assert f">{word}</span>" in outputs["html"], word
    assert "FAIL" in outputs["history"].splitlines()[-1]


def test_json_keeps_machine_values(report: AuditReport) -> None:
    data = json.loads(render(report, "json"))
    assert {c["status"] for c in data["checks"]} <= {"pass", "warn", "fail", "skipped"}
    leak = next(c for c in data["checks"] if c["id"] == "leakage")["figures"]["holdout_leak_share"]
    assert 0 < leak["value"] < 1 and leak["unit"] == "share"  # a fraction, not a percent
    assert leak["numerator"] > 0 and leak["value"] == pytest.approx(leak["numerator"] / leak["denominator"])


def test_shares_are_percent_with_two_decimals_and_their_counts(report: AuditReport) -> None:
    leak = check_by_id(report, "leakage")
    fig = leak.figures["holdout_leak_share"]
    assert re.fullmatch(r"\d+\.\d\d% \([\d,]+ of [\d,]+\)", format_figure(fig))
    text = render(report, "text")
    assert "holdout leakage" in text and format_figure(fig) in text
    # a count that its share already shows is merged into the share: the label appears once
    labels = [f.label for _, f in shown_figures(leak.figures)]
    assert labels.count("units exposed before assignment or start") == 1
    for line in text.splitlines():  # no share in the text report is written as a bare fraction
        if line.strip().startswith(("holdout leakage", "exposure rate")):
            assert "%" in line, line


def test_worst_segment_values_sorted_by_adjusted_p_without_p_of_one(report: AuditReport) -> None:
    seg = check_by_id(report, "srm_segments")
    worst = seg.series["worst"]
    assert worst and worst[0]["value"] == "webkit"
    adjusted = [w["p_holm"] for w in worst]
    assert adjusted == sorted(adjusted) and all(p < 1 for p in adjusted)
    assert [r[-1] for r in seg.tables[0].rows] == adjusted


def test_html_never_breaks_a_segment_value_mid_word(report: AuditReport, tmp_path: Path) -> None:
    page = render_html(report)
    assert "browser_family=<wbr>webkit" in page
    assert "overflow-wrap: anywhere; }" not in page.split(".figures dd")[1].split("\n")[0]
