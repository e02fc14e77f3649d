"""Every table of the readout, audit and plan pages fits at 1280 px, and at 390 px fits or scrolls inside a
visible box; measured in headless Chromium, table by table."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import pytest

from armlock.assign import spec_from_dict
from armlock.audit.report_html import render_html as audit_html
from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.report_html import render_html as plan_html
from armlock.readout.report_html import render_html as readout_html
from armlock.readout.run import run_readout_and_audit

from ..report.browser import open_page
from .helpers import invented_logs

# per table: its name, the box's inner width, the table's width, the box's right edge, the box's
# overflow-x and left border width, the box's scroll width, and whether an ancestor clips it
MEASURE = """() => [...document.querySelectorAll('table')].map(t => {
  const w = t.closest('.tablewrap') || t.parentElement, s = getComputedStyle(w);
  let clipped = false;
  for (let a = w.parentElement; a && a !== document.body; a = a.parentElement) {
    const o = getComputedStyle(a).overflowX;
    if (o === 'hidden' || o === 'clip') clipped = true;
  }
  return {name: t.getAttribute('aria-label') || (t.caption ? t.caption.textContent : '?'),
          box: w.clientWidth, table: t.scrollWidth, right: w.getBoundingClientRect().right,
          overflow: s.overflowX, border: parseFloat(s.borderLeftWidth), scroll: w.scrollWidth, clipped};
})"""


@pytest.fixture(scope="module")
def pages(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """The three pages on invented logs with three exposed arms (the widest effects table: Holm's column)."""
    tmp = tmp_path_factory.mktemp("fit")
    spec = spec_from_dict({"name": "fit", "salt": "fit-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 1000}, {"name": "display_a", "weight": 3000},
                                    {"name": "display_b", "weight": 3000}, {"name": "display_c", "weight": 3000}],
                           "readout": {"covariates": ["pre_orders"], "planned_units": 8000,
                                       "orders": {"attributed": "attributed_channel"}}})
    paths = invented_logs(spec, tmp, units=8000, seed=61, uplift=0.5, base_rate=0.3)
    readout, audit = run_readout_and_audit(spec, visits=paths["visits"], orders=paths["orders"],
                                           exposures=paths["exposures"], identities=paths["identities"],
                                           spend=3000.0, as_of=date(2026, 2, 1))
    plan = make_plan(PlanInputs(weekly_units=300_000, revenue_mean=7.0, revenue_sd=75.0, exposure_rate=0.8,
                                lift=0.05, weekly_spend=40_000, margin=0.4, rho=0.4))
    out = {}
    for name, html in (("readout", readout_html(readout)), ("audit", audit_html(audit)), ("plan", plan_html(plan))):
        out[name] = tmp / f"{name}.html"
        out[name].write_text(html, encoding="utf-8")
    return out


@pytest.mark.parametrize("width", [1280, 390])
@pytest.mark.parametrize("which", ["readout", "audit", "plan"])
def test_no_table_is_clipped(pages: dict[str, Path], which: str, width: int, tmp_path: Path) -> None:
    with open_page(pages[which], width) as (page, _seen):
        tables = page.evaluate(MEASURE)
        page_width = page.evaluate("() => document.documentElement.scrollWidth")
        page.screenshot(path=str(tmp_path / f"{which}-{width}.png"), full_page=True)
    assert tables, f"the {which} page has no table"
    assert page_width <= width, f"the {which} page scrolls sideways at {width} px"
    for t in tables:
        assert not t["clipped"] and t["right"] <= width + 0.5, t
        if width >= 1280:
            assert t["table"] <= t["box"] + 1, f"{which} at {width} px: {t['name']!r} needs scrolling: {t}"
        elif t["table"] > t["box"] + 1:  # a phone: a wide table scrolls inside a box the reader can see
            assert t["overflow"] in ("auto", "scroll") and t["border"] >= 1 and t["scroll"] >= t["table"], t
