"""Hostile strings in the logs themselves travel through the audit into the page and stay inert text."""

from __future__ import annotations

from datetime import UTC, date, datetime
from pathlib import Path

import pandas as pd

from armlock.assign import load_spec
from armlock.assign.init import render_spec_toml
from armlock.audit import synth
from armlock.shared.history import load, record
from armlock.audit.report_html import render_html
from armlock.audit.run import run_audit

from .browser import open_page

BROWSERS = {"webkit": "<script>alert(1)</script>", "other": '"><img src=x onerror=alert(2)>',
            "gecko": "</svg>&amp;"}
CAMPAIGN = {"cart-abandoners": "<svg onload=alert(3)>"}
CHANNEL = {"email": "it's \"quoted\" & $x^2$"}


def _rename(col: pd.Series, mapping: dict[str, str]) -> pd.Series:
    return col.astype(str).replace(mapping)


def test_hostile_values_in_logs_are_shown_literally(tmp_path: Path) -> None:
    spec_path = tmp_path / "hostile.toml"
    spec_path.write_text(render_spec_toml("hostile-test", [("holdout", 2000), ("exposed", 8000)], salt="hostile-salt",
                                          start=datetime(2026, 1, 5, tzinfo=UTC)), encoding="utf-8")
    spec = load_spec(spec_path)
    logs = synth.generate(spec, units=6_000, days=28, seed=3, faults=("leakage", "cookie_churn"))
    logs.visits["browser_family"] = _rename(logs.visits["browser_family"], BROWSERS)
    logs.visits["landing_channel"] = _rename(logs.visits["landing_channel"], CHANNEL)
    logs.exposures["campaign"] = _rename(logs.exposures["campaign"], CAMPAIGN)
    paths = synth.write_logs(logs, tmp_path / "logs", fmt="csv")
    hist = tmp_path / "h.sqlite"
    for day in (date(2026, 1, 25), date(2026, 2, 1)):
        report = run_audit(spec, visits=paths["visits"], exposures=paths["exposures"],
                           identities=paths["identities"], as_of=day)
        record(hist, report)
    page = render_html(report, load(hist, spec.fingerprint))
    for bad in [*BROWSERS.values(), *CAMPAIGN.values()]:
        assert bad not in page  # never raw in the markup ...
    out = tmp_path / "report.html"
    out.write_text(page, encoding="utf-8")
    with open_page(out, 1280) as (pg, seen):
        pg.wait_for_timeout(300)
        text = pg.evaluate("() => document.body.innerText")
        charts = pg.evaluate("() => [...document.querySelectorAll('svg[data-chart] text')]"
                             ".map(t => t.textContent).join('|')")
        assert pg.evaluate("() => document.querySelectorAll('script, img, svg:not([data-chart]):not(.icon)').length") == 0
    # ... and shown literally where the data appears: tables (text) and churn chart labels
    assert BROWSERS["webkit"] in text and BROWSERS["other"] in text and BROWSERS["gecko"] in text
    assert CAMPAIGN["cart-abandoners"] in text and CHANNEL["email"] in text
    assert BROWSERS["webkit"] in charts and BROWSERS["gecko"] in charts
    assert seen["dialogs"] == [] and seen["page_errors"] == [] and seen["console_errors"] == []
    assert seen["non_file_requests"] == []
