"""The plan as text (terminal tables), markdown and JSON; the HTML page is in `report_html`."""

from __future__ import annotations

import json
import math
import textwrap
from collections.abc import Callable
from dataclasses import dataclass

from armlock.shared.text import md_text, strip_controls
from armlock.shared.words import PLAN_WORD

from armlock.shared.words import amount, percent_short, sig3

from .compute import MAX_WEEKS, cash, weeks_words
from .soundness import SIMS
from .model import Cell, Plan

WIDTH = 100  # terminal text is wrapped at this width (tables are as wide as their columns)
# the plan's own status words (not the audit's): what the recommendation is


@dataclass
class Table:
    """A small table of already formatted strings; the first column is the row label."""

    title: str
    header: list[str]
    rows: list[list[str]]


def _grid(p: Plan, title: str, fmt: Callable[[Cell], str]) -> Table:
    header = ["weeks"] + [f"holdout {percent_short(h)}" if i == 0 else percent_short(h) for i, h in enumerate(p.shares)]
    rows = [[str(w)] + [fmt(p.cell(h, w)) for h in p.shares] for w in p.weeks]
    return Table(title, header, rows)


def _rate(x: float) -> str:
    return f"{x * 100:.3g}%"


def headline(p: Plan) -> list[str]:
    """The lines that say what was planned on."""
    x = p.inputs
    cur = f" {x.currency}" if x.currency else ""
    lines = [f"{amount(x.weekly_units)} new units a week; revenue per unit {amount(x.revenue_mean)}{cur} "
             f"(SD {amount(x.revenue_sd)})"
             + (f", conversion {_rate(x.conversion)}, order value {amount(x.order_value or 0)}"
                if x.conversion is not None else "")
             + f"; {percent_short(x.exposure_rate)} of the exposed arm reached by the vendor"]
    if p.cuped:
        lines.append(f"CUPED: pre-period correlation {x.rho:.3g}, variance x {1 - x.rho ** 2:.3g}")
    if p.target_difference is not None and p.target_per_exposed is not None:
        t = (f"target: +{cash(p, p.target_per_exposed)} per reached unit = +{amount(p.target_difference)} per unit "
             f"between the arms ({percent_short(p.target_difference / x.revenue_mean)} of revenue per unit)")
        if p.target_iroas is not None:
            t += f", iROAS {sig3(p.target_iroas)}"
        if x.against == "break-even":
            t += ", to be told from break-even"
        lines.append(t)
    money_bits = []
    if x.weekly_spend is not None:
        money_bits.append(f"weekly spend {cash(p, x.weekly_spend)} (the whole spend, as the readout divides)")
    if p.break_even_iroas is not None:
        money_bits.append(f"gross margin {percent_short(x.margin or 0)} (break-even iROAS {sig3(p.break_even_iroas)})")
    if money_bits:
        lines.append("; ".join(money_bits))
    lines.append(f"{x.power * 100:.3g}% power, two-sided alpha {x.alpha * 100:g}%; --prefer {p.prefer}")
    return lines


def _weeks_cell(w: float) -> str:
    return f"{w:,.1f}" if math.isfinite(w) and w <= MAX_WEEKS else f"> {MAX_WEEKS}"


def choices(p: Plan) -> Table | None:
    """The one table of the short output: each holdout share, its sound weeks, what it costs, how it was checked."""
    if not p.summaries:
        return None
    x = p.inputs
    has_profit = any(s.profit_forgone is not None for s in p.summaries)
    head = ["holdout", "weeks", "exact", "weekly", "holdout units", "forgone"] + \
        (["profit"] if has_profit else []) + ["power", "false wins", ""]
    rows = []
    for s in p.summaries:
        chosen = p.recommendation.share is not None and s.share == p.recommendation.share
        mark = ("<- recommended" if p.recommendation.status == "pass" else "<- fastest") if chosen else ""
        if s.weeks is not None and s.weeks > p.max_weeks and not mark:
            mark = "too long"
        row = [percent_short(s.share), weeks_words(s.weeks).replace(" weeks", "") if s.weeks is not None else weeks_words(math.inf),
               _weeks_cell(s.weeks_needed), _weeks_cell(s.weeks_needed_weekly_reading),
               amount(s.share * x.weekly_units * s.weeks) if s.weeks is not None else "",
               amount(s.revenue_forgone) if s.revenue_forgone is not None else ""]
        if has_profit:
            row.append(amount(s.profit_forgone) if s.profit_forgone is not None else "")
        shown = s.weeks is not None  # a share with no sound design has no rates to show
        row += [f"{s.power_simulated * 100:.1f}%" if shown and s.power_simulated is not None else "",
                f"{s.false_win_rate * 100:.1f}%" if shown and s.false_win_rate is not None else "", mark]
        rows.append(row)
    cur = f" in {x.currency}" if x.currency else ""
    return Table(f"Each holdout share: weeks = the whole weeks where the readout's test keeps its level and power "
                 f"(simulated, {SIMS:,} tests: power and false wins); exact = the normal arithmetic's weeks; weekly = "
                 f"the weeks if read every week; forgone = revenue{cur} the holdout does not get if the channel works as "
                 "targeted" + ("; profit = margin x forgone minus the spend saved on the holdout (negative when the "
                 "saving is larger)" if has_profit else "") + f"; too long = over the {p.max_weeks} weeks allowed",
                 head, rows)


def tables(p: Plan, *, compact: bool = False) -> list[Table]:
    """Every table of the plan, in reading order; `compact` (the terminal) leaves the no-CUPED figures out of the grid."""
    x = p.inputs
    if p.cuped and compact:
        ratio = sum(c.mde / c.mde_cuped for c in p.cells) / len(p.cells)
        which = f"with CUPED; without it about {ratio:.2f} times these"
    else:
        which = "with CUPED; without in brackets" if p.cuped else "no pre-period covariate"
    out = [_grid(p, f"Smallest detectable difference in revenue per unit between the arms ({which}; "
                    f"% of revenue per unit {amount(x.revenue_mean)})",
                 (lambda c: f"{sig3(c.mde_cuped)} ({sig3(c.mde)}) {sig3(c.mde_relative_cuped * 100)}%")
                 if p.cuped and not compact
                 else (lambda c: f"{sig3(c.mde_cuped)} {sig3(c.mde_relative_cuped * 100)}%"))]
    ch = choices(p)
    if ch is not None:
        out.append(ch)
    if x.weekly_spend is not None:
        if p.break_even_iroas is not None:
            out.append(_grid(p, f"Smallest iROAS distinguishable from zero / from break-even "
                                f"({sig3(p.break_even_iroas)}); iROAS = incremental revenue / the whole spend",
                             lambda c: f"{sig3(c.iroas_vs_zero or 0)} / {sig3(c.iroas_vs_break_even or 0)}"))
        else:
            out.append(_grid(p, "Smallest iROAS distinguishable from zero (give --margin for break-even)",
                             lambda c: sig3(c.iroas_vs_zero or 0)))
    return out


def weekly_reading_line(p: Plan) -> str:
    ratio = p.anytime_factor / p.z_alpha
    rec = p.recommendation
    s = p.summary(rec.share) if rec.share is not None else (p.summaries[0] if p.summaries else None)
    more = ""
    if s is not None and math.isfinite(s.weeks_needed_weekly_reading):
        more = (f"; read every week at the readout's own boundary (simulated), a {percent_short(s.share)} holdout needs "
                f"{s.weekly_factor:.2f} times the weeks for the same power ({_weeks_cell(s.weeks_needed_weekly_reading)}"
                f" instead of {_weeks_cell(s.weeks_needed)})")
    return (f"Reading the result every week: the readout's anytime-valid interval is {ratio:.2f} times as wide as "
            f"the fixed-horizon one at the planned end ({p.anytime_factor:.3g} vs {p.z_alpha:.3g} standard errors)"
            f"{more}: that is the price of deciding on the anytime interval alone (a readout without a planned "
            "size, or stopping before it). With the planned size in the spec (--write-spec sets planned_units), the "
            "readout decides at the planned final look on the fixed-horizon interval, so weekly looks before it "
            "cost no weeks.")


def _text_table(t: Table) -> str:
    widths = [max(len(r[i]) for r in [t.header, *t.rows]) for i in range(len(t.header))]
    fmt = lambda r: "  ".join(v.ljust(w) if i == 0 else v.rjust(w) for i, (v, w) in enumerate(zip(r, widths)))  # noqa: E731
    return "\n".join([*textwrap.wrap(t.title, WIDTH), fmt(t.header).rstrip(), *(fmt(r).rstrip() for r in t.rows)])


def _estimate_value(name: str, v: float) -> str:
    if name == "conversion":
        return _rate(v)
    return amount(v) if abs(v) >= 1 else f"{v:.4g}"


def render_text(p: Plan, *, full: bool = False) -> str:
    """The terminal plan: short by default (the recommendation, its alternatives, one table); `full` adds every
    share x weeks grid and the assumptions."""
    rec = p.recommendation
    wrap = lambda text, first="", rest="  ": textwrap.wrap(text, WIDTH, initial_indent=first, subsequent_indent=rest)  # noqa: E731
    parts = ["armlock plan: " + headline(p)[0], *("  " + line for line in headline(p)[1:]), "",
             *wrap(f"{PLAN_WORD[rec.status]}: {rec.sentence}"), ""]
    if p.estimates:
        parts += ["Estimated from the pre-period files:",
                  *(f"  {e.name}: {_estimate_value(e.name, e.value)} ({e.how})" for e in p.estimates), ""]
    shown = tables(p, compact=True) if full else [t for t in [choices(p)] if t is not None]
    for t in shown:
        parts += [_text_table(t), ""]
    parts += [*wrap(weekly_reading_line(p))]
    if full:
        parts += ["", "Assumptions:"]
        for a in p.assumptions:
            parts += wrap(a, "  - ", "    ")
    if p.notes:
        parts += ["", "Notes:"]
        for n in p.notes:
            parts += wrap(n, "  - ", "    ")
    if not full:
        parts += ["", "(--full adds the detectable effect and iROAS for every share and duration, and the assumptions)"]
    return strip_controls("\n".join(parts)) + "\n"  # data never moves the cursor or retitles the terminal


_md_cell = md_text  # every text of the markdown goes through the one escaper (HTML, markdown, controls)


def render_markdown(p: Plan) -> str:
    rec = p.recommendation
    parts = ["# Holdout plan", "", *(f"- {md_text(line)}" for line in headline(p)), "",
             f"**{PLAN_WORD[rec.status].capitalize()}:** {md_text(rec.sentence)}", ""]
    if p.estimates:
        parts += ["## Estimated from the pre-period files", "",
                  *(f"- {md_text(e.name)}: {e.value:.6g} ({md_text(e.how)})" for e in p.estimates), ""]
    for t in tables(p):
        parts += [f"**{md_text(t.title)}**", "", "| " + " | ".join(_md_cell(h) for h in t.header) + " |",
                  "|" + "|".join(["---"] + ["---:"] * (len(t.header) - 1)) + "|",
                  *("| " + " | ".join(_md_cell(v) for v in r) + " |" for r in t.rows), ""]
    parts += [md_text(weekly_reading_line(p)), "", "## Assumptions", "", *(f"- {md_text(a)}" for a in p.assumptions)]
    if p.notes:
        parts += ["", "## Notes", "", *(f"- {md_text(n)}" for n in p.notes)]
    return "\n".join(parts) + "\n"


def _finite(obj: object) -> object:
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_finite(v) for v in obj]
    return obj


def render_json(p: Plan) -> str:
    return json.dumps(_finite(p.to_dict()), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


RENDERERS: dict[str, Callable[[Plan], str]] = {"text": render_text, "markdown": render_markdown, "json": render_json}


FORMATS = ("text", "markdown", "json", "html")


def render_as(p: Plan, fmt: str, *, full: bool = False) -> str:
    """The plan as text (`full`: every grid and the assumptions), markdown, json or html."""
    if fmt == "html":
        from .report_html import render_html

        return render_html(p)
    if fmt == "text":
        return render_text(p, full=full)
    return RENDERERS[fmt](p)
