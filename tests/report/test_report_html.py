"""The HTML report as text: self-contained, escaped, deterministic, one section and chart per check."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from xml.etree import ElementTree

import pytest
from scipy import stats

from armlock.shared.history import row_from_report
from armlock.audit.report_html import render_html, share_band

from .fixtures import HOSTILE, build_report, weekly

# each chart is drawn wide and, for phones, redrawn narrow (shown by a CSS media query)
CHARTS = {"srm": ["arm-share", "arm-share-narrow", "srm-p", "srm-p-narrow"], "leakage": ["leakage", "leakage-narrow"],
          "balance": ["love", "love-narrow"], "churn": ["churn", "churn-narrow"], "srm_segments": [],
          "history": ["history", "history-narrow"]}


class Walk(HTMLParser):
    """Collects tags, the chart ids per section, and the visible text."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.section: str | None = None
        self.charts: dict[str, list[str]] = {}
        self.text: list[str] = []
        self.depth = {"svg": 0}

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "section":
            self.section = a.get("data-check")
            self.charts.setdefault(self.section or "", [])
        if tag == "svg":
            self.depth["svg"] += 1
            if a.get("data-chart"):
                self.charts.setdefault(self.section or "", []).append(a["data-chart"] or "")

    def handle_endtag(self, tag: str) -> None:
        if tag == "svg":
            self.depth["svg"] -= 1

    def handle_data(self, data: str) -> None:
        self.text.append(data)


def walk(page: str) -> Walk:
    w = Walk()
    w.feed(page)
    w.close()
    return w


def history_rows(n: int = 4) -> list[dict]:
    return [dict(row_from_report(r), recorded_at="2026-03-30T06:00:00Z") for r in weekly(n)]


def test_band_is_three_binomial_standard_errors() -> None:
    # Reference: the binomial standard deviation sqrt(n p (1-p)) from scipy.stats.binom (general
    # purpose library); the share's SE is that over n.
    for theta, n in [(0.1, 1_000), (0.5, 12_345), (0.9, 77)]:
        lo, hi = share_band(theta, n)
        se = stats.binom.std(n, theta) / n
        assert hi - theta == pytest.approx(3 * se, rel=1e-12)
        assert theta - lo == pytest.approx(3 * se, rel=1e-12)


def test_every_check_has_its_section_and_charts() -> None:
    rep = weekly()[-1]
    w = walk(render_html(rep, history_rows(3)))
    assert w.charts == CHARTS
    assert w.depth["svg"] == 0


def test_history_chart_needs_an_earlier_run() -> None:
    page = render_html(build_report())
    w = walk(page)
    assert w.charts["history"] == []
    assert "No earlier run is recorded" in page


def test_self_contained_no_script_no_external_reference() -> None:
    page = render_html(weekly()[-1], history_rows(3))
    w = walk(page)
    names = {t for t, _ in w.tags}
    assert not names & {"script", "link", "iframe", "img", "object", "embed"}
    for tag, attrs in w.tags:
        for k, v in attrs.items():
            if k.startswith("xmlns"):
                continue  # XML namespace names are identifiers, never fetched
            assert not re.search(r"(https?:|//)", v or ""), (tag, k, v)
    assert 'name="viewport"' in page and "@media print" in page


def test_hostile_ids_are_shown_literally_and_break_nothing() -> None:
    page = render_html(build_report(hostile=True), [dict(row_from_report(build_report(as_of="2026-03-16")),
                                                           recorded_at="x")])
    w = walk(page)
    assert not any(t in ("script", "img") for t, _ in w.tags)
    assert w.depth["svg"] == 0  # a literal "</svg>" in the data did not close a chart early
    text = "".join(w.text)
    for bad in HOSTILE:
        assert bad in text, bad
    assert w.charts == CHARTS
    # every chart is well-formed XML: its data text was escaped by the SVG writer
    for svg in re.findall(r"<svg [^>]*data-chart[\s\S]*?</svg>\s*</figure>", page):
        ElementTree.fromstring(svg.rsplit("</figure>", 1)[0])


def test_output_is_deterministic_and_ids_unique() -> None:
    rep, hist = weekly()[-1], history_rows(3)
    a, b = render_html(rep, hist), render_html(rep, hist)
    assert a == b
    ids = re.findall(r'\sid="([^"]+)"', a)
    assert len(ids) == len(set(ids))


def test_verdict_is_in_words_colour_and_shape() -> None:
    page = render_html(weekly()[-1])
    assert 'data-verdict="fail"' in page and ">FAIL<" in page
    w = walk(page)
    badges = [a.get("data-status") for t, a in w.tags if t == "span" and "badge" in (a.get("class") or "")]
    assert {"fail", "warn", "skipped"} <= set(badges)
    assert ">WARN<" in page and ">NOT RUN<" in page
    for old_word in ("Healthy", "Needs a look", "Broken", "Not checked", "Skipped"):  # one word per state
        assert old_word not in page, old_word


def test_missing_series_gives_section_without_chart() -> None:
    rep = build_report()
    for c in rep.checks:
        c.series = {}
    w = walk(render_html(rep))
    assert all(v == [] for v in w.charts.values())
    assert set(w.charts) == set(CHARTS)


def _luminance(hex_colour: str) -> float:
    # W3C, Web Content Accessibility Guidelines (WCAG) 2.1 (2018), definition "relative luminance":
    # sRGB channel c -> c/12.92 if c <= 0.04045 else ((c+0.055)/1.055)^2.4; L = .2126R + .7152G + .0722B
    rgb = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def contrast(a: str, b: str) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05), lighter over darker."""
    hi, lo = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_contrast_formula_matches_wcag_extremes() -> None:
    # WCAG 2.1: black on white is 21:1, a colour on itself 1:1
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast("#777777", "#777777") == pytest.approx(1.0)
    # #767676 on white is the commonly quoted lightest grey passing AA (4.5:1) (common practice)
    assert 4.5 <= contrast("#767676", "#ffffff") < 4.6


def test_text_colours_reach_wcag_aa() -> None:
    # WCAG 2.1 success criterion 1.4.3 (Contrast, Minimum): at least 4.5:1 for normal text
    from armlock.shared import html as r

    pairs = [(r.INK, r.PAPER), (r.INK, r.CARD), (r.MUTED, r.PAPER), (r.MUTED, r.CARD), (r.ACCENT, r.CARD)]
    pairs += [(fg, bg) for _, fg, bg in r.STATUS_STYLE.values()]  # badges and the verdict box
    pairs += [(r.INK, bg) for _, _, bg in r.STATUS_STYLE.values()]  # verdict text on its box
    for fg, bg in pairs:
        assert contrast(fg, bg) >= 4.5, (fg, bg, round(contrast(fg, bg), 2))


def test_charts_draw_the_specs_thresholds() -> None:
    from armlock.assign.spec_audit import AuditThresholds

    rep = build_report()
    default = render_html(rep)
    assert "fails below 0.001 (anytime-valid p)" in default and "warns above 2%" in default
    assert "fixed threshold" not in default  # the fixed-horizon p is information only: no line of its own
    custom = render_html(rep, thresholds=AuditThresholds(srm_anytime_p=0.0002, smd_fail=0.3, churn_warn=0.03))
    assert "fails below 0.0002 (anytime-valid p)" in custom and "fails below 0.001 " not in custom
    assert "|SMD| 0.3: fails if also beyond chance" in custom and "warns above 3%" in custom
    assert "range chance alone gives" in custom
