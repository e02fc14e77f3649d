"""The readout page: self-contained, escaped, one chart per question, the gate on top."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from armlock.readout.report_html import render_html
from armlock.readout.run import run_readout

from ..report.browser import open_page
from .helpers import small_spec, visits_frame, write
from .test_engine import _orders


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory):
    d = tmp_path_factory.mktemp("page")
    spec = small_spec()
    v = visits_frame(spec, n=60)
    return run_readout(spec, visits=write(d / "v.csv", v), orders=write(d / "o.csv", _orders(v)), spend=100.0,
                       attributed_revenue=400.0)


def test_page_is_self_contained_with_three_charts(report) -> None:
    page = render_html(report)
    assert page.startswith("<!DOCTYPE html>") and "default-src 'none'" in page
    charts = ["readout-roas", "readout-looks", "readout-arms"]  # each drawn wide, then narrow for phones
    assert re.findall(r'data-chart="([^"]+)"', page) == [c + s for c in charts for s in ("", "-narrow")]
    assert "http://" not in page.replace("http://www.w3.org", "") and "https://" not in page
    assert "anytime interval" in page and "Did it pay?" in page


def test_data_is_escaped(report) -> None:
    hostile = report.model_copy(update={"input_notes": ['<script>alert("x")</script> & <b>'],
                                        "cautions": ["<img src=x onerror=alert(1)>"]})
    page = render_html(hostile)
    assert "<script>alert" not in page and "<img src=x" not in page
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &lt;b&gt;" in page


def test_failing_gate_is_on_top(report) -> None:
    gate = [g.model_copy(update={"status": "fail"}) if g.id == "srm" else g for g in report.gate]
    bad = report.model_copy(update={"status": "fail", "trustworthy": False, "gate": gate,
                                    "headline": "NOT TRUSTWORTHY: the split audit fails (x)."})
    page = render_html(bad)
    top = page.split('<section', 1)[0]
    assert 'data-verdict="fail"' in top and "FAIL: not trustworthy" in top and "NOT TRUSTWORTHY" in page
    assert top.index('id="decision"') < top.index('data-verdict="fail"')  # the answer comes first


def test_without_spend_no_roas_chart(report) -> None:
    page = render_html(report.model_copy(update={"money": report.money.model_copy(update={"iroas": None})}))
    assert 'data-chart="readout-roas"' not in page


def test_page_written_to_disk_is_utf8(report, tmp_path: Path) -> None:
    out = tmp_path / "r.html"
    out.write_text(render_html(report), encoding="utf-8")
    assert out.read_text(encoding="utf-8").count("<svg") >= 3


@pytest.mark.parametrize("width", [390, 1280])
def test_page_in_a_browser(report, tmp_path: Path, width: int) -> None:
    f = tmp_path / "readout.html"
    f.write_text(render_html(report), encoding="utf-8")
    visible = "[...document.querySelectorAll('svg[data-chart]')].filter(s => s.getBoundingClientRect().width > 0)"
    with open_page(f, width) as (page, seen):
        charts = page.evaluate(f"() => {visible}.map(s => [s.dataset.chart, s.getBoundingClientRect().width, "
                               "s.getBoundingClientRect().height, s.closest('figure').clientWidth, "
                               "s.closest('figure').scrollWidth])")
        # a phone sees the narrow drawings, a desktop the wide ones; each fills its figure, none scrolls
        suffix = "-narrow" if width < 544 else ""
        assert [c[0] for c in charts] == [f"readout-roas{suffix}", f"readout-looks{suffix}", f"readout-arms{suffix}"]
        assert all(w >= 0.9 * fig and scroll <= fig + 1 and h > 100 for _, w, h, fig, scroll in charts), charts
        assert page.evaluate("() => document.documentElement.scrollWidth") <= width
        smallest = page.evaluate(f"() => Math.min(...{visible}.flatMap(s => [...s.querySelectorAll('text')])"
                                 ".map(t => t.getBoundingClientRect().height).filter(h => h > 0))")
        assert smallest >= 7.5, f"chart text is {smallest:.1f}px tall"
        page.screenshot(path=str(tmp_path / f"readout-{width}.png"), full_page=True)
    assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                    "failed_requests": []}
