"""The HTML/SVG kit every page shares (audit, readout, plan, overview): palette, styles, badges, tables, inline SVG charts.

No network: styles are inline and charts are matplotlib SVG written into the page. Every value
that comes from the data goes through `esc` (ids may contain markup); text inside the charts is
escaped by matplotlib's SVG writer, and mathtext parsing is off (`RC`) so `$` is literal.
"""

from __future__ import annotations

import html
import io
import math
import re
from datetime import date
from typing import Any

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.figure import Figure as MplFigure  # noqa: E402

from .words import column_unit, format_value, sentence, status_word  # noqa: E402

# Our palette. Text colours reach WCAG AA (>= 4.5:1) on their backgrounds.
INK, PAPER, CARD, RULE, MUTED = "#1d2528", "#f6f3ee", "#ffffff", "#d8d2c8", "#4f5a5e"
ACCENT = "#0c5c66"
ARM_COLOURS = ["#b4471f", "#1f5f8b", "#5b7a1a", "#7a3e86", "#8a6d00", "#2f6f5e"]
BAND = "#e6dccd"
STATUS_STYLE: dict[str, tuple[str, str, str]] = {  # word (shared/words.py), text colour, background
    "pass": (status_word("pass"), "#17603a", "#e3f2e8"),
    "warn": (status_word("warn"), "#7a4d00", "#fdf0d5"),
    "fail": (status_word("fail"), "#9e1f24", "#fbe4e3"),
    "skipped": (status_word("skipped"), "#4a4a4a", "#ececec"),
}
# Chart widths in inches: the wide drawing for screens and print, the narrow one for phones
# (redrawn with legends above the plot, so its 8 pt text stays readable without scrolling).
WIDE, NARROW = 7.2, 4.4
ICON = {  # shape differs by status too, never colour alone
    "pass": '<circle cx="8" cy="8" r="7"/><path d="M4.5 8.3l2.3 2.3 4.7-5" fill="none" stroke="#fff" stroke-width="2"/>',
    "warn": '<path d="M8 1l7.5 13.5h-15z"/><path d="M8 5.5v4.5M8 11.6v1.4" stroke="#fff" stroke-width="1.8"/>',
    "fail": '<path d="M5 1h6l4 4v6l-4 4h-6l-4-4v-6z"/><path d="M5.3 5.3l5.4 5.4M10.7 5.3l-5.4 5.4" stroke="#fff" stroke-width="1.9"/>',
    "skipped": '<rect x="1" y="1" width="14" height="14" rx="3"/><path d="M4.5 8h7" stroke="#fff" stroke-width="2"/>',
}
RC: dict[str, Any] = {
    "svg.fonttype": "none",  # text stays text: small, selectable, escaped by the writer
    "text.parse_math": False,  # a `$` in an id is shown, never parsed
    "font.family": "sans-serif",
    "font.size": 10,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "axes.titlesize": 11,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": MUTED,
    "ytick.color": MUTED,
    "text.color": INK,
    "axes.grid": True,
    "grid.color": "#e9e4dc",
    "grid.linewidth": 0.8,
    "legend.frameon": False,
    "figure.facecolor": "none",
    "axes.facecolor": "none",
}


def esc(value: Any) -> str:
    """Any value as HTML text (quotes included, so it is safe in attributes too)."""
    return html.escape(str(value), quote=True)


def svg(fig: MplFigure, chart_id: str, caption: str) -> str:
    """The figure as inline SVG: no prolog, scalable, ids unique to this chart, deterministic."""
    buf = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": f"armlock-{chart_id}", "svg.id": f"chart-{chart_id}"}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None}, bbox_inches="tight")
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"\s*<metadata>[\s\S]*?</metadata>", "", text, count=1)
    # matplotlib numbers its ids per figure (figure_1, patch_1...): make them unique in the page
    ids = set(re.findall(r'\sid="([^"]+)"', text))
    text = re.sub(r'(\sid="|#)([^")\s]+)(?=[")])',
                  lambda m: f"{m.group(1)}{chart_id}-{m.group(2)}" if m.group(2) in ids else m.group(0), text)
    # never drawn below 95% of its natural size, so its smallest (8 pt) text stays readable; the
    # audit's charts have a narrow twin for phones (`both`), a chart without one scrolls in its figure
    box = re.search(r'viewBox="[\d.]+ [\d.]+ ([\d.]+) [\d.]+"', text)
    least = float(box.group(1)) * 0.95 if box else 448.0
    text = re.sub(r'<svg([^>]*?) width="[^"]*" height="[^"]*"',
                  rf'<svg\1 role="img" aria-label="{esc(caption)}" data-chart="{esc(chart_id)}" '
                  rf'class="chart" style="min-width:{least:.0f}px"', text, count=1)
    return text


def dates(values: list[str]) -> list[Any]:
    return [date.fromisoformat(str(v)[:10]) for v in values]


def log_axis(ax: Any) -> None:
    """Log scale with plain tick labels (mathtext is off, so the default labels would show raw TeX)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    ax.set_yscale("log")
    ax.yaxis.set_major_locator(LogLocator(base=10, numticks=8))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.yaxis.set_minor_formatter(NullFormatter())


def date_axis(ax: Any) -> None:
    import matplotlib.dates as mdates

    loc = mdates.AutoDateLocator(minticks=3, maxticks=7)
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(loc))


def share_band(theta: float, n: int, k: float = 3.0) -> tuple[float, float]:
    """Expected share ± k binomial standard errors at n units: theta ± k·sqrt(theta(1-theta)/n)."""
    half = k * math.sqrt(theta * (1 - theta) / max(n, 1))
    return theta - half, theta + half


def legend(ax: Any, narrow: bool, *, wide_loc: str = "upper right", ncol: int = 3, outside: bool = False) -> None:
    """The legend: above the plot on a narrow drawing (never on the data), else where it fits."""
    if narrow:
        ax.legend(loc="lower left", bbox_to_anchor=(0, 1.0), fontsize=8, ncol=1, borderaxespad=0.3)
    elif outside:
        ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8)
    else:
        ax.legend(loc=wide_loc, fontsize=8, ncol=ncol)


def first_clause(text: str) -> str:
    """The first clause of a summary (up to its first '; ' or '. '), as a sentence."""
    cut = min([i for i in (text.find("; "), text.find(". ")) if i >= 0], default=len(text))
    return sentence(text[:cut].rstrip(" .;")) + "."


def badge(status: str) -> str:
    word, fg, bg = STATUS_STYLE.get(status, STATUS_STYLE["skipped"])
    return (f'<span class="badge" data-status="{esc(status)}" style="color:{fg};background:{bg}">'
            f'<svg class="icon" viewBox="0 0 16 16" aria-hidden="true" fill="{fg}">{ICON.get(status, ICON["skipped"])}</svg>'
            f'{esc(word)}</span>')


def cell(v: Any, unit: str = "number") -> str:
    if unit in ("share", "p") and isinstance(v, (int, float)) and not isinstance(v, bool):
        return esc(format_value(v, unit))
    if isinstance(v, float):
        if not math.isfinite(v):
            return esc(v)
        if abs(v) >= 1000:
            return esc(f"{v:,.0f}" if v == int(v) else f"{v:,.1f}")
        return esc(f"{v:.4g}" if abs(v) >= 1e-4 or v == 0 else f"{v:.2e}")
    if isinstance(v, int) and not isinstance(v, bool):
        return esc(f"{v:,}")
    if isinstance(v, str) and SEPARATOR.search(v):
        # lists and segment values wrap after a separator, never mid-word (a thousands comma never)
        return SEPARATOR.sub(lambda m: m.group(0) + "<wbr>", esc(v))
    return esc("" if v is None else v)


SEPARATOR = re.compile(r"[=/]|,(?!\d)")


def wraps(v: Any) -> bool:
    return isinstance(v, str) and (" " in v or bool(SEPARATOR.search(v)))


def table(t: Any) -> str:
    head = "".join(f"<th scope=\"col\">{esc(c)}</th>" for c in t.columns)
    units = [column_unit(str(c)) for c in t.columns]
    # words may wrap (a table reflows before it scrolls); numbers and intervals' ends never break
    body = "".join("<tr>" + "".join(f"<td{' class=words' if wraps(v) else ''}>{cell(v, u)}</td>"
                                    for v, u in zip(row, units)) + "</tr>" for row in t.rows)
    # the title sits above the scrolling box, so a wide table never cuts it off on a phone
    return (f'<p class="tabletitle">{esc(t.title)}</p><div class="tablewrap"><table aria-label="{esc(t.title)}">'
            f"<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></div>")


def breakable(text: str) -> str:
    """Escaped text that may wrap only after '=', ',' or '/' (a segment value is never cut mid-word)."""
    return re.sub(r"([=,/])", r"\1<wbr>", esc(text))


def both(draw: Any, *args: Any) -> str:
    """A chart drawn twice: wide for screens and print, narrow (redrawn, not shrunk) for phones."""
    *rest, chart_id = args
    return (f'<div class="chart-wide">{draw(*rest, chart_id)}</div>'
            f'<div class="chart-narrow">{draw(*rest, chart_id + "-narrow", narrow=True)}</div>')


CSS = f"""
:root {{ color-scheme: light; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; background: {PAPER}; color: {INK}; font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }}
main {{ max-width: 72rem; margin: 0 auto; padding: 1rem; }}
.top {{ border-left: 6px solid {ACCENT}; padding: .25rem 0 .25rem 1rem; margin: .5rem 0 1rem; }}
.top h1 {{ font-size: 1.5rem; margin: 0; overflow-wrap: anywhere; }}
.top p {{ margin: .2rem 0; color: {MUTED}; overflow-wrap: anywhere; }}
.verdict {{ display: flex; gap: .8rem; align-items: flex-start; padding: 1rem; border-radius: 10px; margin-bottom: 1rem; border: 2px solid currentColor; }}
.verdict .icon {{ width: 2.2rem; height: 2.2rem; flex: none; }}
.verdict .word {{ font-size: 1.25rem; font-weight: 700; display: block; }}
.verdict ul {{ margin: .4rem 0 0; padding-left: 1.2rem; color: {INK}; }}
.verdict a {{ color: inherit; }}
.verdict p {{ margin: .2rem 0 0; color: {INK}; }}
nav ol {{ list-style: none; padding: 0; margin: 0 0 1rem; display: grid; grid-template-columns: repeat(auto-fill, minmax(15rem, 1fr)); gap: .4rem; }}
nav a {{ display: flex; justify-content: space-between; gap: .5rem; align-items: center; background: {CARD}; border: 1px solid {RULE}; border-radius: 8px; padding: .45rem .6rem; color: {INK}; text-decoration: none; }}
nav a:hover, nav a:focus {{ border-color: {ACCENT}; outline: 2px solid {ACCENT}; outline-offset: 1px; }}
.check {{ background: {CARD}; border: 1px solid {RULE}; border-radius: 10px; padding: 1rem; margin: 0 0 1rem; border-top: 5px solid {RULE}; }}
.check.s-pass {{ border-top-color: #2f8a55; }} .check.s-warn {{ border-top-color: #c98a12; }}
.check.s-fail {{ border-top-color: #c0373c; }} .check.s-skipped {{ border-top-color: #9a9a9a; }}
.check header {{ display: flex; flex-wrap: wrap; gap: .5rem; justify-content: space-between; align-items: center; }}
.check h2 {{ font-size: 1.15rem; margin: 0; overflow-wrap: anywhere; }}
.badge, .verdict {{ -webkit-print-color-adjust: exact; print-color-adjust: exact; }}
.badge {{ display: inline-flex; align-items: center; gap: .3rem; font-weight: 600; font-size: .85rem; padding: .1rem .55rem .1rem .35rem; border-radius: 999px; white-space: nowrap; }}
.badge .icon {{ width: 1rem; height: 1rem; }}
.summary {{ margin: .6rem 0; }}
.reason {{ color: {MUTED}; }}
.figures {{ display: grid; grid-template-columns: repeat(auto-fill, minmax(10rem, 1fr)); gap: .5rem; margin: .6rem 0; }}
.figures div {{ background: {PAPER}; border-radius: 6px; padding: .4rem .6rem; }}
.figures dt {{ font-size: .8rem; color: {MUTED}; overflow-wrap: anywhere; }}
.figures dd {{ margin: 0; font-size: 1.1rem; font-weight: 600; font-variant-numeric: tabular-nums; overflow-wrap: normal; word-break: normal; hyphens: none; }}
.figures div.wide {{ grid-column: span 2; }}
@media (max-width: 34rem) {{ .figures div.wide {{ grid-column: 1 / -1; }} }}
figure {{ margin: .8rem 0; overflow-x: auto; }}
svg.chart {{ width: 100%; height: auto; display: block; }}
.chart-narrow {{ display: none; }}
@media (max-width: 34rem) {{ .chart-wide {{ display: none; }} .chart-narrow {{ display: block; }} }}
.tablewrap {{ overflow-x: auto; margin: .6rem 0; max-width: 100%; }}
/* a table wider than its box scrolls inside it, and the box shows it: a rule around it, shadows at
   the edge that has more columns (pure CSS: local backgrounds cover the shadows at the ends), and
   the first column kept in view */
.tablewrap {{ border: 1px solid {RULE}; border-radius: 4px; padding: 0 .3rem;
  background: linear-gradient(to right, #fff 30%, rgba(255,255,255,0)) left / 2rem 100% no-repeat local,
              linear-gradient(to left, #fff 30%, rgba(255,255,255,0)) right / 2rem 100% no-repeat local,
              radial-gradient(farthest-side at 0 50%, rgba(0,0,0,.25), rgba(0,0,0,0)) left / .8rem 100% no-repeat scroll,
              radial-gradient(farthest-side at 100% 50%, rgba(0,0,0,.25), rgba(0,0,0,0)) right / .8rem 100% no-repeat scroll,
              #fff; }}
table {{ border-collapse: collapse; font-size: .88rem; min-width: 50%; font-variant-numeric: tabular-nums; }}
caption, .tabletitle {{ text-align: left; font-weight: 600; padding: .2rem 0; margin: .8rem 0 0; }}
th, td {{ border-bottom: 1px solid {RULE}; padding: .3rem .7rem .3rem 0; text-align: left; vertical-align: top; overflow-wrap: break-word; }}
td {{ white-space: nowrap; }} td:first-child, td.words {{ white-space: normal; }}
td.words {{ min-width: 5.5rem; }}
th {{ color: {MUTED}; font-weight: 600; }}
.changes li {{ margin: .15rem 0; }}
.notes {{ color: {MUTED}; font-size: .9rem; }}
footer {{ color: {MUTED}; font-size: .85rem; border-top: 1px solid {RULE}; padding-top: .6rem; margin-top: 1.5rem; }}
code {{ background: #ebe6de; padding: 0 .25rem; border-radius: 4px; }}
@media (max-width: 34rem) {{ main {{ padding: .5rem; }} .check {{ padding: .7rem; }} body {{ font-size: 15px; }} }}
@media print {{
  body {{ background: #fff; font-size: 11pt; }} main {{ max-width: none; padding: 0; }}
  nav {{ display: none; }} .check {{ break-inside: avoid; border: 1px solid #999; border-top-width: 4px; }}
  figure {{ break-inside: avoid; overflow: visible; }} svg.chart {{ min-width: 0 !important; }}
  .chart-wide {{ display: block !important; }} .chart-narrow {{ display: none !important; }} .verdict {{ break-after: avoid; }} a {{ color: inherit; text-decoration: none; }}
}}
"""
