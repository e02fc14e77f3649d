"""The plan page: self-contained, three charts, readable on a phone and a desktop in headless Chromium."""

from __future__ import annotations

from pathlib import Path

import pytest

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.report_html import render_html

from ..report.browser import open_page

SHOP = PlanInputs(weekly_units=300_000, revenue_mean=7.0, revenue_sd=75.0, exposure_rate=0.8, lift=0.05,
                  weekly_spend=40_000, margin=0.4, rho=0.4)


def test_page_is_self_contained_and_escaped() -> None:
    page = render_html(make_plan(SHOP, notes=["<script>alert(1)</script> in a note"]))
    assert "<script>alert" not in page and "&lt;script&gt;" in page
    assert "http://" not in page.replace("http://www.w3.org", "") and "https://" not in page
    assert page.count('data-chart="') == 6  # three charts, each drawn wide and redrawn narrow for phones
    assert 'data-status="pass"' in page


@pytest.mark.parametrize("status,inputs", [
    ("fail", PlanInputs(weekly_units=200, revenue_mean=7.0, revenue_sd=75.0, lift=0.05)),
    ("skipped", PlanInputs(weekly_units=2_000, revenue_mean=7.0, revenue_sd=75.0)),
])
def test_page_without_a_recommendation(status: str, inputs: PlanInputs) -> None:
    page = render_html(make_plan(inputs))
    assert f'data-status="{status}"' in page
    assert page.count('data-chart="') == 2 * (3 if status == "fail" else 2)  # no cost chart without a target


@pytest.mark.parametrize("width", [390, 1280])
def test_page_in_a_browser(tmp_path: Path, width: int) -> None:
    f = tmp_path / "plan.html"
    f.write_text(render_html(make_plan(SHOP)), encoding="utf-8")
    with open_page(f, width) as (page, seen):
        charts = page.evaluate("() => [...document.querySelectorAll('svg[data-chart]')]"
                               ".filter(s => s.getBoundingClientRect().width > 0).map(s => "
                               "[s.dataset.chart, s.getBoundingClientRect().width, s.getBoundingClientRect().height, "
                               "s.closest('figure').clientWidth, s.closest('figure').scrollWidth])")
        # a phone sees the narrow drawings, a desktop the wide ones; each fills its figure, none scrolls
        suffix = "-narrow" if width < 544 else ""
        assert [c[0] for c in charts] == [f"mde{suffix}", f"cost{suffix}", f"weekly{suffix}"]
        assert all(w >= 0.9 * fig and scroll <= fig + 1 and h > 150 for _, w, h, fig, scroll in charts), charts
        assert page.evaluate("() => document.documentElement.scrollWidth") <= width
        smallest = page.evaluate("() => Math.min(...[...document.querySelectorAll('svg[data-chart]')]"
                                 ".filter(s => s.getBoundingClientRect().width > 0).flatMap(s => [...s.querySelectorAll('text')])"
                                 ".map(t => t.getBoundingClientRect().height).filter(h => h > 0))")
        assert smallest >= 7.5, f"chart text is {smallest:.1f}px tall"
        page.screenshot(path=str(tmp_path / f"plan-{width}.png"), full_page=True)
        lines = page.evaluate(f"() => document.querySelectorAll('svg[data-chart=\"mde{suffix}\"] path').length")
        assert lines > 5
        assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                        "failed_requests": []}
