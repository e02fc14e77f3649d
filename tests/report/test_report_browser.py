"""The report opened in headless Chromium as a person would: loads clean, charts drawn, no script runs."""

from __future__ import annotations

from pathlib import Path

import pytest

from armlock.shared.history import row_from_report
from armlock.audit.report_html import render_html

from .browser import open_page
from .fixtures import HOSTILE, build_report, weekly

EXPECTED = {"srm": 2, "leakage": 1, "balance": 1, "churn": 1, "srm_segments": 0, "history": 1}

# charts a person sees: each chart is drawn twice (wide, and redrawn narrow for phones), one is shown
COUNT_CHARTS = """() => Object.fromEntries([...document.querySelectorAll('section[data-check]')]
    .map(s => [s.dataset.check, [...s.querySelectorAll('svg[data-chart]')]
    .filter(c => c.getBoundingClientRect().width > 0).length]))"""
VISIBLE = "[...document.querySelectorAll('svg[data-chart]')].filter(c => c.getBoundingClientRect().width > 0)"


def _write(tmp_path: Path, hostile: bool) -> Path:
    runs = weekly()
    hist = [dict(row_from_report(r), recorded_at="2026-03-30T06:00:00Z") for r in runs[:-1]]
    rep = build_report(hostile=True, as_of=runs[-1].as_of) if hostile else runs[-1]
    out = tmp_path / "report.html"
    out.write_text(render_html(rep, hist), encoding="utf-8")
    return out


@pytest.mark.parametrize("width", [390, 1280])
def test_report_loads_clean_with_every_chart(tmp_path: Path, width: int) -> None:
    html_file = _write(tmp_path, hostile=False)
    with open_page(html_file, width) as (page, seen):
        assert page.evaluate(COUNT_CHARTS) == EXPECTED
        # a phone gets the narrow drawing, a desktop the wide one; either fills its figure without
        # scrolling sideways, and the page itself never scrolls sideways
        narrow = page.evaluate(f"() => {VISIBLE}.map(c => c.closest('.chart-narrow') !== null)")
        assert set(narrow) == {width < 544}
        fits = page.evaluate(f"() => {VISIBLE}.map(c => [c.getBoundingClientRect().width, "
                             "c.closest('figure').clientWidth, c.closest('figure').scrollWidth, "
                             "c.getBoundingClientRect().height])")
        assert all(w >= 0.9 * fig and scroll <= fig + 1 and h > 100 for w, fig, scroll, h in fits), fits
        assert page.evaluate("() => document.documentElement.scrollWidth") <= width
        smallest = page.evaluate(f"() => Math.min(...{VISIBLE}.flatMap(c => [...c.querySelectorAll('text')])"
                                 ".map(t => t.getBoundingClientRect().height).filter(h => h > 0))")
        assert smallest >= 7.5, f"chart text is {smallest:.1f}px tall"
        page.screenshot(path=str(tmp_path / f"report-{width}.png"), full_page=True)
    assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                    "failed_requests": []}


def test_hostile_ids_run_no_script_and_show_literally(tmp_path: Path) -> None:
    html_file = _write(tmp_path, hostile=True)
    with open_page(html_file, 1024) as (page, seen):
        page.wait_for_timeout(300)
        text = page.evaluate("() => document.body.innerText")
        assert HOSTILE[0] in text and HOSTILE[1] in text
        chart_text = page.evaluate(f"() => {VISIBLE}.flatMap(c => [...c.querySelectorAll('text')])"
                                   ".map(t => t.textContent).join('|')")
        for bad in (HOSTILE[0], HOSTILE[1], HOSTILE[2], HOSTILE[3], HOSTILE[5]):
            assert bad in chart_text, bad
        assert page.evaluate("() => document.querySelectorAll('img, script').length") == 0
        assert page.evaluate(COUNT_CHARTS) == EXPECTED
        page.screenshot(path=str(tmp_path / "hostile.png"), full_page=True)
    assert seen["dialogs"] == [] and seen["page_errors"] == [] and seen["console_errors"] == []
    assert seen["non_file_requests"] == []
