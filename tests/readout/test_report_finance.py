"""The finance lead's page: the decision first, net contribution after media cost, the design; one A4 page."""

from __future__ import annotations

import re
from datetime import date
from pathlib import Path

import pytest

from armlock.assign import spec_from_dict
from armlock.readout.report_finance import render_finance
from armlock.readout.run import run_readout

from ..report.browser import open_page
from .helpers import invented_logs


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory):
    tmp = tmp_path_factory.mktemp("finance")
    spec = spec_from_dict({"name": "finance-page", "salt": "finance-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}],
                           "readout": {"covariates": ["pre_orders"], "planned_units": 6000,
                                       "orders": {"attributed": "attributed_channel"}}})
    paths = invented_logs(spec, tmp, units=6000, seed=51, uplift=0.8, base_rate=0.4)
    return run_readout(spec, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"],
                       spend=900.0, as_of=date(2026, 2, 1))


def test_net_contribution_and_a_year_at_the_current_spend(report) -> None:
    m = report.money
    assert m.net_contribution is not None and m.net_contribution_per_year is not None
    assert m.net_contribution.value == pytest.approx(m.incremental_profit.value - m.spend)
    assert m.net_contribution.lo == pytest.approx(m.incremental_profit.lo - m.spend)
    assert m.net_contribution.anytime_hi == pytest.approx(m.incremental_profit.anytime_hi - m.spend)
    assert m.days == 28
    assert m.net_contribution_per_year.value == pytest.approx(m.net_contribution.value * 365 / 28)
    assert report.design is not None and report.design.holdout_share == pytest.approx(0.1)
    assert report.design.units == sum(a.units for a in report.arms)


def test_page_leads_with_the_answer_and_says_what_is_not_covered(report) -> None:
    page = render_finance(report)
    body = page.split("<body>", 1)[1]
    assert body.index('id="decision"') < body.index("net contribution after media cost")
    for said in ("a year, at the current spend", "ROI", "break-even", "How the test was run", "held out",
                 "planned", "does not cover", "app", "longer-term", "What to do:"):
        assert said in page, said
    assert "http://" not in page and "https://" not in page and "<script" not in page


def test_page_prints_on_one_a4_page_and_fits_a_phone(report, tmp_path: Path) -> None:
    f = tmp_path / "finance.html"
    f.write_text(render_finance(report), encoding="utf-8")
    for width in (390, 1280):
        with open_page(f, width) as (page, seen):
            assert page.evaluate("() => document.documentElement.scrollWidth") <= width
            page.screenshot(path=str(tmp_path / f"finance-{width}.png"), full_page=True)
            if width == 1280:
                pdf = page.pdf(format="A4", print_background=True, prefer_css_page_size=True)
        assert seen["console_errors"] == [] and seen["non_file_requests"] == []
    pages = len(re.findall(rb"/Type\s*/Page(?!s)", pdf))
    assert pages == 1, f"the finance page prints on {pages} A4 pages"
