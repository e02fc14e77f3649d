"""The readout as one self-contained HTML page, in the audit report's visual language (inline SVG, no network).

Every value from the data goes through `esc`; chart text is escaped by matplotlib's SVG writer
with mathtext off (the audit report's settings), so ids or currency signs are shown, never parsed.
"""

from __future__ import annotations


import math
from typing import Any

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt

from armlock.shared.html import (
    ICON,
    RC,
    svg,
    table,
    ARM_COLOURS,
    BAND,
    CSS,
    INK,
    MUTED,
    NARROW,
    WIDE,
    both,
    dates,
    legend,
    date_axis,
    badge,
    esc,
)

from armlock.shared.words import page_money, percent_whole, ratio_text

from .model import Interval, ReadoutReport
from .render import MARK, _adjust_line, decision_word, tables


ANYTIME_BAND = "#dce9ef"  # pale blue: the wider, anytime band; the fixed band is the audit's sand
_GATE_WORDS = {  # status -> word on the banner, text colour, background
    "pass": ("PASS: trustworthy split", "#17603a", "#e3f2e8"),
    "warn": ("WARN: read with caution", "#7a4d00", "#fdf0d5"),
    "fail": ("FAIL: not trustworthy", "#9e1f24", "#fbe4e3"),
}


_DECISION_COLOURS = {  # answer -> text colour, background
    "pays": ("#17603a", "#e3f2e8"),
    "does_not_pay": ("#9e1f24", "#fbe4e3"),
    "not_yet_known": ("#3d4a50", "#eceff1"),
}


def decision_box(r: ReadoutReport) -> str:
    """The answer to the page's question, first on the page: answer, reason, interval used, action."""
    d = r.decision
    fg, bg = _DECISION_COLOURS["not_yet_known" if d.withheld else d.answer]
    basis = ("fixed-horizon interval: this is the planned final look" if d.basis == "fixed"
             else "anytime interval: valid at every look before the planned final one")
    p = f" · p of iROAS = break-even {d.p_breakeven:.2g}" if d.p_breakeven is not None else ""
    return (f'<div class="decision" id="decision" data-answer="{esc(d.answer)}" data-basis="{esc(d.basis)}" '
            f'style="color:{fg};background:{bg}" role="status">'
            f'<span class="word">{esc(decision_word(r))}</span>'
            f'<p class="reason">{esc(d.reason)}</p>'
            f'<p class="basis">Read on the {d.level}% {esc(basis)} · break-even iROAS {d.breakeven_iroas:.2f} '
            f'({esc(d.breakeven_source)}){esc(p)}</p>'
            f'<p class="action"><strong>What to do:</strong> {esc(d.action)}</p></div>')


def _finite(*vals: float | None) -> bool:
    return all(v is not None and math.isfinite(v) for v in vals)


def _f(v: float | None) -> float:
    """A value `_finite` has already passed, typed as a float."""
    assert v is not None
    return v


def chart_looks(r: ReadoutReport, chart_id: str, narrow: bool = False) -> str:
    """Cumulative revenue-per-unit difference at each look with the fixed and anytime intervals."""
    pts = [lk for lk in r.looks if _finite(lk.difference, lk.lo, lk.hi, lk.anytime_lo, lk.anytime_hi)]
    days = dates([lk.date for lk in pts])
    fig, ax = plt.subplots(figsize=(NARROW, 3.8) if narrow else (WIDE, 3.2))
    ax.fill_between(days, [_f(lk.anytime_lo) for lk in pts], [_f(lk.anytime_hi) for lk in pts], color=ANYTIME_BAND,
                    lw=0, label="anytime interval (valid at every look)")
    ax.fill_between(days, [_f(lk.lo) for lk in pts], [_f(lk.hi) for lk in pts], color=BAND, lw=0,
                    label="fixed interval (one planned look)")
    ax.plot(days, [_f(lk.anytime_lo) for lk in pts], color=MUTED, lw=0.8, ls=(0, (2, 2)))
    ax.plot(days, [_f(lk.anytime_hi) for lk in pts], color=MUTED, lw=0.8, ls=(0, (2, 2)))
    ax.plot(days, [_f(lk.difference) for lk in pts], color=ARM_COLOURS[1], lw=2, marker="o", ms=3,
            label="estimate")
    ax.axhline(0, color=INK, lw=1)
    # two lines on both drawings: on one line the label is taller than the 3.2-inch plot and was cut off
    ax.set_ylabel(f"revenue per unit,\nexposed − holdout ({r.money.currency})")
    if narrow:
        legend(ax, narrow)
    else:
        ax.legend(loc="lower left", bbox_to_anchor=(0, 1.01), fontsize=8, ncol=3)
    date_axis(ax)
    if narrow:
        plt.setp(ax.get_xticklabels(), rotation=90)
    fig.tight_layout()
    return svg(fig, chart_id, "Revenue per unit difference at each look with fixed and anytime intervals")


def chart_arms(r: ReadoutReport, chart_id: str, narrow: bool = False) -> str:
    """Per arm: conversion and revenue per unit with their intervals (side by side; stacked when narrow)."""
    tall = 0.9 + 0.45 * max(len(r.arms), 2)
    fig, axes = (plt.subplots(2, 1, figsize=(NARROW, 2 * tall + 0.3)) if narrow
                 else plt.subplots(1, 2, figsize=(WIDE, tall), sharey=True))
    y = list(range(len(r.arms)))[::-1]
    for ax, (title, get, scale) in zip(axes, (("conversion (%)", lambda a: a.conversion, 100.0),
                                              (f"revenue per unit ({r.money.currency})", lambda a: a.revenue_per_unit, 1.0))):
        for yy, (i, a) in zip(y, enumerate(r.arms)):
            iv: Interval = get(a)
            if not _finite(iv.value, iv.lo, iv.hi):
                continue
            colour = ARM_COLOURS[i % len(ARM_COLOURS)]
            v, lo, hi = _f(iv.value), _f(iv.lo), _f(iv.hi)
            ax.errorbar([v * scale], [yy], xerr=[[(v - lo) * scale], [(hi - v) * scale]],
                        fmt="o" if a.role == "holdout" else "D", color=colour, capsize=4, ms=6, lw=2)
        ax.set_title(title, loc="left", fontsize=9)
        ax.grid(axis="y", visible=False)
    for ax in axes[:2 if narrow else 1]:
        ax.set_yticks(y, [f"{a.name} ({a.role})" for a in r.arms], fontsize=8)
    for ax in axes:
        lo, hi = ax.get_xlim()
        ax.set_xlim(lo - 0.15 * (hi - lo), hi + 0.15 * (hi - lo))
    fig.tight_layout()
    return svg(fig, chart_id, "Conversion and revenue per unit of each arm with 95% intervals")


def has_roas(r: ReadoutReport) -> bool:
    """Whether there is an iROAS to draw (a spend was given and the interval is finite)."""
    m = r.money
    return m.iroas is not None and _finite(m.iroas.value, m.iroas.lo, m.iroas.hi)


def chart_roas(r: ReadoutReport, chart_id: str, narrow: bool = False) -> str:
    """iROAS with both intervals against the attributed ROAS and the break-even line (see `has_roas`)."""
    m = r.money
    assert m.iroas is not None
    fig, ax = plt.subplots(figsize=(NARROW, 3.2) if narrow else (WIDE, 2.2))
    rows = [("measured: iROAS", 1)] + ([("attribution: ROAS", 0)] if m.attributed_roas is not None else [])
    iv = m.iroas
    if _finite(iv.anytime_lo, iv.anytime_hi):
        ax.plot([_f(iv.anytime_lo), _f(iv.anytime_hi)], [1, 1], color=MUTED, lw=8, alpha=0.35, solid_capstyle="butt",
                label="anytime interval")
    v, lo, hi = _f(iv.value), _f(iv.lo), _f(iv.hi)
    ax.errorbar([v], [1], xerr=[[v - lo], [hi - v]], fmt="D", color=ARM_COLOURS[1],
                capsize=5, ms=7, lw=2, label=f"{round(100 * (1 - r.settings.get('alpha', 0.05)))}% interval")
    if m.attributed_roas is not None:
        ax.plot([m.attributed_roas], [0], marker="s", ms=9, color=ARM_COLOURS[0], ls="none",
                label="attributed ROAS")
    breakeven = 1 / m.margin
    ax.axvline(breakeven, color=INK, lw=1, ls=(0, (4, 3)), label=f"break-even iROAS {breakeven:.2f} (margin {m.margin:g})")
    ax.axvline(0, color=MUTED, lw=0.8)
    ax.set_yticks([yy for _, yy in rows], [name for name, _ in rows], fontsize=9)
    ax.set_ylim(-0.7, 1.7)
    ax.set_xlabel(f"{m.currency} of revenue per {m.currency} of spend")
    ax.grid(axis="y", visible=False)
    legend(ax, narrow, outside=True)
    fig.tight_layout()
    return svg(fig, chart_id, "Measured iROAS with its intervals against the ROAS attribution credited")


def _range(iv: Interval | None, f: Any, anytime: bool = False) -> str:
    if iv is None:
        return ""
    lo, hi = (iv.anytime_lo, iv.anytime_hi) if anytime else (iv.lo, iv.hi)
    if lo is None:
        return ""
    return f"{f(lo)} to {f(hi) if hi is not None else 'unbounded'}"


def _figures(r: ReadoutReport) -> str:
    m, cur = r.money, r.money.currency
    level = round(100 * (1 - r.settings.get("alpha", 0.05)))
    at = r.decision.basis == "anytime"  # the interval the decision reads, on the figures too
    word = f"{level}% anytime" if at else f"{level}%"
    items = [
        ("incremental revenue", page_money(m.incremental_revenue.value, cur), _range(m.incremental_revenue, lambda v: page_money(v, cur), at)),
        ("incremental profit", page_money(m.incremental_profit.value, cur), _range(m.incremental_profit, lambda v: page_money(v, cur), at)),
        ("net contribution after spend", page_money(m.net_contribution.value, cur) if m.net_contribution else "n/a",
         _range(m.net_contribution, lambda v: page_money(v, cur), at)),
        ("spend", page_money(m.spend, cur), ""),
        ("iROAS", ratio_text(m.iroas.value) if m.iroas else "n/a", _range(m.iroas, ratio_text, at)),
        ("ROI", percent_whole(m.roi.value) if m.roi else "n/a", _range(m.roi, percent_whole, at)),
        ("cost per incremental buyer", page_money(m.cost_per_incremental_buyer.value, cur, 2) if m.cost_per_incremental_buyer else "n/a",
         _range(m.cost_per_incremental_buyer, lambda v: page_money(v, cur, 2), at)),
        ("attributed revenue", page_money(m.attributed_revenue, cur), ""),
        ("attributed ROAS", ratio_text(m.attributed_roas), ""),
        ("incremental ÷ attributed", ratio_text(m.incremental_to_attributed.value) if m.incremental_to_attributed else "n/a",
         _range(m.incremental_to_attributed, ratio_text, at)),
    ]
    cells = "".join(f"<div><dt>{esc(label)}</dt><dd>{esc(value)}</dd>"
                    + (f'<dd class="range">{word}: {esc(rng)}</dd>' if rng else "") + "</div>"
                    for label, value, rng in items)
    return f'<dl class="figures">{cells}</dl>'


EXTRA_CSS = """
.decision { padding: 1rem; border-radius: 10px; margin-bottom: 1rem; border: 3px solid currentColor;
  -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.decision .word { font-size: 1.6rem; font-weight: 800; display: block; letter-spacing: .02em; }
.decision p { margin: .3rem 0 0; color: #1d2427; overflow-wrap: anywhere; }
.decision .reason { font-size: 1.1rem; font-weight: 600; }
.figures dd.range { font-size: .8rem; font-weight: 400; color: #4f5a5e; }
.headline { font-size: 1.15rem; font-weight: 600; margin: .3rem 0 0; }
"""


def render_html(r: ReadoutReport) -> str:
    """The whole readout page as a string."""
    word, fg, bg = _GATE_WORDS.get(r.status, _GATE_WORDS["warn"])
    if not r.trustworthy and r.status != "fail":
        word = f"{MARK[r.status]}: not trustworthy"
    bad = [g for g in r.gate if g.status != "pass"]
    gate_list = "".join(f"<li>{badge(g.status)} <strong>{esc(g.title)}</strong>: {esc(g.summary.split('; ')[0])}</li>"
                        for g in bad)
    with matplotlib.rc_context(RC):  # type: ignore[arg-type]
        # each chart wide for screens and print, and redrawn narrow for phones (the audit's `both`)
        looks = f"<figure>{both(chart_looks, r, 'readout-looks')}</figure>" if len(r.looks) >= 2 else ""
        arms = f"<figure>{both(chart_arms, r, 'readout-arms')}</figure>"
        roas = f"<figure>{both(chart_roas, r, 'readout-roas')}</figure>" if has_roas(r) else ""
    all_tables = tables(r)
    arm_t, eff_t, money_t, *rest = all_tables
    cautions = "".join(f"<li>{esc(c)}</li>" for c in r.cautions)
    notes = "".join(f"<li>{esc(n)}</li>" for n in r.input_notes)
    assumptions = "".join(f"<li>{esc(a)}</li>" for a in (r.exposure[0].assumptions if r.exposure else []))
    icon = ICON["pass" if r.status == "pass" else r.status]
    exposure_sec = ""
    if r.exposure:
        exposure_sec = (f'<section class="check" id="exposed" data-section="exposed"><header><h2>Effect on the exposed</h2></header>'
                        f'<p class="summary">Only part of the exposed arm ever saw an ad. Dividing the arm-against-arm effect by '
                        f'the difference in exposure rates gives the effect per exposed unit (Wald estimate, complier '
                        f'average causal effect). It rests on assumptions:</p><ul>{assumptions}</ul>'
                        f'{"".join(table(t) for t in rest if t.title.startswith("Effect on the exposed"))}</section>')
    looks_t = "".join(table(t) for t in rest if t.title.startswith("Revenue per unit difference"))
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; img-src data:">
<title>Readout: {esc(r.experiment)} as of {esc(r.as_of)}</title>
<style>{CSS}{EXTRA_CSS}</style></head>
<body><main>
<div class="top"><h1>Did the channel pay? Readout of {esc(r.experiment)}</h1>
<p>Data as of {esc(r.as_of)} · arm against arm (intent to treat) · spec fingerprint <code>{esc(r.fingerprint)}</code></p></div>
{decision_box(r)}
<div class="verdict" data-verdict="{esc(r.status)}" style="color:{fg};background:{bg}" role="status">
<svg class="icon" viewBox="0 0 16 16" aria-hidden="true" fill="{fg}">{icon}</svg>
<div><span class="word">Audit gate: {esc(word)}</span>
{f'<ul class="gate">{gate_list}</ul>' if gate_list else ''}</div></div>
<section class="check" id="money" data-section="money"><header><h2>Did it pay?</h2></header>
<p class="headline">{esc(r.headline)}</p><p class="summary">{esc(r.estimand)}</p><p class="summary">{esc(r.reading_advice)}</p>{_figures(r)}{roas}{table(money_t)}</section>
<section class="check" id="over-time" data-section="over-time"><header><h2>The estimate over time</h2></header>
<p class="summary">Each point is what a reader would have seen at the end of that day: the sand band is the fixed
interval, the pale blue band the anytime interval. Only the anytime band may be read at every look.</p>{looks}{looks_t}</section>
<section class="check" id="arms" data-section="arms"><header><h2>Per arm</h2></header>{arms}{table(arm_t)}</section>
<section class="check" id="effects" data-section="effects"><header><h2>Effects</h2></header>
<p class="summary">{esc(_adjust_line(r) or "")}</p>{table(eff_t)}</section>
{exposure_sec}
{f'<div class="notes"><strong>Cautions:</strong><ul>{cautions}</ul></div>' if cautions else ''}
{f'<div class="notes"><strong>About the input:</strong><ul>{notes}</ul></div>' if notes else ''}
<footer>Written by armlock {esc(r.armlock_version)} at {esc(r.generated_at)} · schema {esc(r.schema_)} · audit gate {esc(MARK[r.status])}.
Visitor ids, customer keys and orders can be personal data: share this report only as your consent records and local
privacy law allow, and ask the site's own counsel when unsure.</footer>
</main></body></html>
"""
