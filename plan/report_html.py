"""The plan as one self-contained HTML page, in the audit report's visual language (its CSS, palette, SVG charts)."""

from __future__ import annotations

import math
from datetime import datetime, timezone

import matplotlib

from armlock.assign import __version__
from armlock.shared.html import (  # one visual language with the audit and readout pages
    ICON, RC, ARM_COLOURS, BAND, CSS, INK, MUTED, NARROW, STATUS_STYLE, WIDE, both, legend, svg, esc,
)
from armlock.shared.confseq import anytime_halfwidth
from armlock.shared.words import PLAN_WORD

from armlock.shared.words import amount, percent_short, sig3
from .model import Plan
from .render import Table, headline, tables, weekly_reading_line

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

_EXTRA_CSS = """
.rec .word { font-size: 1.25rem; font-weight: 700; display: block; }
.lead { margin: .2rem 0 0; font-size: 1.05rem; }
ul.plain { margin: .4rem 0; padding-left: 1.2rem; }
"""


def _share_colour(i: int) -> str:
    return ARM_COLOURS[i % len(ARM_COLOURS)]


def chart_mde(p: Plan, chart_id: str = "mde", narrow: bool = False) -> str:
    """Detectable effect (relative to revenue per unit) against weeks: one line per holdout share."""
    fig, ax = plt.subplots(figsize=(NARROW, 4.4) if narrow else (WIDE, 3.6))
    markers = ["o", "s", "^", "D", "v", "P"]
    for i, h in enumerate(p.shares):
        cells = [p.cell(h, w) for w in p.weeks]
        ax.plot(p.weeks, [c.mde_relative_cuped * 100 for c in cells], color=_share_colour(i), lw=2,
                marker=markers[i % len(markers)], ms=3.5, label=f"holdout {percent_short(h)}")
        if p.cuped:
            ax.plot(p.weeks, [c.mde_relative * 100 for c in cells], color=_share_colour(i), lw=1, ls=":")
    if p.cuped:
        ax.plot([], [], color=MUTED, lw=1, ls=":", label="same, without CUPED")
    if p.target_difference is not None:
        ax.axhline(p.target_difference / p.inputs.revenue_mean * 100, color=INK, lw=1.2, ls=(0, (5, 3)),
                   label="target (arm-level)")
    ax.axvline(p.max_weeks, color=MUTED, lw=1, ls="-.", label=f"longest allowed ({p.max_weeks} wk)")
    rec = p.recommendation
    if rec.share is not None and rec.weeks is not None and rec.weeks in p.weeks:
        c = p.cell(rec.share, rec.weeks)
        ax.scatter([rec.weeks], [c.mde_relative_cuped * 100], s=140, facecolors="none", edgecolors=INK, lw=2,
                   zorder=5, label="recommended")
    _, top = ax.get_ylim()
    ax.set_ylim(0, top)
    ax.set_xlabel("weeks the test runs")
    ax.set_ylabel("detectable difference,\n% of revenue per unit" if narrow else "detectable difference, % of revenue per unit")
    legend(ax, narrow, outside=True)
    fig.tight_layout()
    return svg(fig, chart_id, "Smallest detectable difference against weeks, one line per holdout share")


def chart_cost(p: Plan, chart_id: str = "cost", narrow: bool = False) -> str:
    """Each share's weeks needed for the target against the revenue its holdout forgoes."""
    fig, ax = plt.subplots(figsize=(NARROW, 3.8) if narrow else (WIDE, 3.2))
    # (share, weeks, revenue forgone) of every share with a sound design
    sound = [(s.share, s.weeks, s.revenue_forgone) for s in p.summaries
             if s.weeks is not None and s.revenue_forgone is not None]
    for i, (share, weeks, forgone) in enumerate(sound):
        ax.scatter([weeks], [forgone], s=70, color=_share_colour(i), zorder=3,
                   marker="o" if share != p.recommendation.share else "*")
        label = f"{percent_short(share)}: {weeks} wk" + ("" if narrow else f", {amount(forgone)}")
        ax.annotate(label, (weeks, forgone), xytext=(6, 4), textcoords="offset points", fontsize=8,
                    color=INK)
    ax.axvline(p.max_weeks, color=MUTED, lw=1, ls="-.", label=f"longest allowed ({p.max_weeks} wk)")
    ax.set_xscale("log")
    from matplotlib.ticker import FuncFormatter, NullFormatter

    lo = min([w for _, w, _ in sound] + [p.max_weeks]) / 1.5
    hi = max([w for _, w, _ in sound] + [p.max_weeks]) * 2.2  # room for the labels
    ax.set_xlim(lo, hi)
    ax.set_xticks([t for t in (1, 2, 4, 8, 13, 26, 52, 104, 208, 520, 1040) if lo <= t <= hi] or [p.max_weeks])
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: amount(v)))
    ax.set_ylim(0, ax.get_ylim()[1] * 1.15)
    ax.set_xlabel("weeks needed for the target (log scale)")
    ax.set_ylabel("revenue forgone" if narrow else "revenue forgone by the holdout")
    legend(ax, narrow, wide_loc="lower right")
    fig.tight_layout()
    return svg(fig, chart_id, "Weeks each holdout share needs against the revenue it forgoes")


def chart_weekly(p: Plan, share: float, weeks: int, chart_id: str = "weekly", narrow: bool = False) -> str:
    """For one plan: the half-width of the fixed-horizon and the anytime-valid interval, week by week."""
    x = p.inputs
    k = math.sqrt(1 - x.rho ** 2)
    t_opt = x.weekly_units * weeks
    ws = list(range(1, weeks + 1))
    se = [x.revenue_sd * k * math.sqrt(1 / (share * x.weekly_units * w) + 1 / ((1 - share) * x.weekly_units * w))
          for w in ws]
    fixed = [p.z_alpha * s for s in se]
    anytime = [anytime_halfwidth(s, x.weekly_units * w, t_opt=t_opt, alpha=x.alpha) for s, w in zip(se, ws)]
    fig, ax = plt.subplots(figsize=(NARROW, 3.6) if narrow else (WIDE, 3.0))
    ax.fill_between(ws, 0, fixed, color=BAND, lw=0)
    ax.plot(ws, fixed, color=ARM_COLOURS[1], lw=2, marker="s", ms=3, label="fixed-horizon (read once, at the end)")
    ax.plot(ws, anytime, color=ARM_COLOURS[0], lw=2, ls=(0, (6, 2)), marker="^", ms=3,
            label="anytime-valid (read every week)")
    if p.target_difference is not None:
        ax.axhline(p.target_difference, color=INK, lw=1.2, ls=(0, (5, 3)), label="target difference")
    ax.set_ylim(0, min(max(anytime), 4 * max(fixed[-1], p.target_difference or 0)) * 1.1)
    ax.set_xlabel("week")
    ax.set_ylabel("interval half-width, per unit")
    legend(ax, narrow, ncol=1)
    fig.tight_layout()
    return svg(fig, chart_id, f"Interval half-width by week for a {percent_short(share)} holdout over {weeks} weeks")


def table(t: Table) -> str:
    head = "".join(f'<th scope="col">{esc(c)}</th>' for c in t.header)
    body = "".join("<tr>" + "".join(f"<td>{esc(v)}</td>" for v in r) + "</tr>" for r in t.rows)
    return (f'<div class="tablewrap"><table><caption>{esc(t.title)}</caption><thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table></div>")


def _section(sid: str, title: str, body: str) -> str:
    return (f'<section class="check" id="{esc(sid)}" data-section="{esc(sid)}"><header><h2>{esc(title)}</h2>'
            f"</header>{body}</section>")


def render_html(p: Plan) -> str:
    """The whole plan page as a string: the advice, three charts, the tables, assumptions and notes."""
    rec = p.recommendation
    _, fg, bg = STATUS_STYLE[rec.status]
    tabs = tables(p)
    with matplotlib.rc_context(RC):  # type: ignore[arg-type]
        mde_chart = both(chart_mde, p, "mde")  # wide for screens and print, redrawn narrow for phones
        cost_chart = both(chart_cost, p, "cost") if p.summaries else ""
        if rec.share is not None and rec.weeks is not None:
            weekly_share, weekly_weeks = rec.share, rec.weeks
        else:
            weekly_share, weekly_weeks = max(p.shares), max(p.weeks)
        weekly_chart = both(chart_weekly, p, weekly_share, weekly_weeks, "weekly")
    lines = headline(p)
    figures = "".join(f"<div><dt>{esc(e.name)}</dt><dd>{esc(sig3(e.value))}</dd></div>" for e in p.estimates)
    est = ""
    if p.estimates:
        how = "".join(f"<li>{esc(e.name)}: {esc(e.how)}</li>" for e in p.estimates)
        est = _section("estimated", "Estimated from the pre-period files",
                       f'<dl class="figures">{figures}</dl><ul class="plain">{how}</ul>')
    sections = [
        _section("mde", "Detectable effect by duration",
                 '<p class="summary">The smallest difference in revenue per unit between the arms that the test '
                 "detects with the planned power, as a share of revenue per unit"
                 + (" (solid: with CUPED; dotted: without)" if p.cuped else "") + ".</p>"
                 f"<figure>{mde_chart}</figure>{table(tabs[0])}"),
    ]
    if p.summaries:
        sections.append(_section("cost", "What each choice costs",
                                 '<p class="summary">A smaller holdout forgoes a little less revenue but needs many more '
                                 "weeks; a larger one is faster and forgoes more.</p>"
                                 f"<figure>{cost_chart}</figure>{table(tabs[1])}"))
    if p.inputs.weekly_spend is not None:
        sections.append(_section("iroas", "Return on spend it can resolve", table(tabs[-1])))
    sections.append(_section("weekly", "What reading every week costs",
                             f'<p class="summary">{esc(weekly_reading_line(p))} The chart is for a '
                             f"{esc(percent_short(weekly_share))} holdout over {weekly_weeks} weeks.</p>"
                             f"<figure>{weekly_chart}</figure>"))
    assumptions = "".join(f"<li>{esc(a)}</li>" for a in p.assumptions)
    notes = "".join(f"<li>{esc(n)}</li>" for n in p.notes)
    sections.append(_section("assumptions", "Assumptions and notes",
                             f'<ul class="plain">{assumptions}</ul>'
                             + (f'<p class="summary"><strong>Notes</strong></p><ul class="plain">{notes}</ul>' if notes else "")))
    stamp = datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; img-src data:">
<title>Holdout plan</title>
<style>{CSS}{_EXTRA_CSS}</style></head>
<body><main>
<div class="top"><h1>Holdout plan</h1>{"".join(f"<p>{esc(line)}</p>" for line in lines)}</div>
<div class="verdict rec" data-status="{esc(rec.status)}" style="color:{fg};background:{bg}" role="status">
<svg class="icon" viewBox="0 0 16 16" aria-hidden="true" fill="{fg}">{ICON[rec.status]}</svg>
<div><span class="word">{esc(PLAN_WORD[rec.status].capitalize())}</span><p class="lead">{esc(rec.sentence)}</p></div></div>
{est}{"".join(sections)}
<footer>Written by armlock {esc(__version__)} at {esc(stamp)} · schema armlock.plan/1. A plan is only as good as its
inputs: check the traffic and revenue figures against the shop's own reports before committing a budget. The page holds
only aggregates; the pre-period files it may come from hold visitor ids, which can be personal data: keep them as your
consent records and local privacy law allow, and ask the site's own counsel when unsure.</footer>
</main></body></html>
"""
