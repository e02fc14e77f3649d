"""The plan as text (terminal tables), markdown and JSON; the HTML page is in `report_html`."""

from __future__ import annotations

import json
import math
import textwrap
from collections.abc import Callable
from dataclasses import dataclass

from .compute import money, num, pct
from .model import Cell, Plan

WIDTH = 100  # terminal text is wrapped at this width (tables are as wide as their columns)
_STATUS_WORD = {"pass": "PASS", "warn": "WARN", "fail": "FAIL", "skipped": "SKIPPED"}


@dataclass
class Table:
    """A small table of already formatted strings; the first column is the row label."""

    title: str
    header: list[str]
    rows: list[list[str]]


def _grid(p: Plan, title: str, fmt: Callable[[Cell], str]) -> Table:
    header = ["weeks"] + [f"holdout {pct(h)}" if i == 0 else pct(h) for i, h in enumerate(p.shares)]
    rows = [[str(w)] + [fmt(p.cell(h, w)) for h in p.shares] for w in p.weeks]
    return Table(title, header, rows)


def _rate(x: float) -> str:
    return f"{x * 100:.3g}%"


def headline(p: Plan) -> list[str]:
    """The lines that say what was planned on."""
    x = p.inputs
    lines = [f"{money(x.weekly_units)} new units a week; revenue per unit {money(x.revenue_mean)} "
             f"(SD {money(x.revenue_sd)})"
             + (f", conversion {_rate(x.conversion)}, order value {money(x.order_value or 0)}"
                if x.conversion is not None else "")
             + f"; {pct(x.exposure_rate)} of the exposed arm reached"]
    if p.cuped:
        lines.append(f"CUPED: pre-period correlation {x.rho:.3g}, variance x {1 - x.rho ** 2:.3g}")
    if p.target_difference is not None and p.target_per_exposed is not None:
        t = (f"target: +{money(p.target_per_exposed)} per exposed unit = +{money(p.target_difference)} per unit "
             f"between the arms ({pct(p.target_difference / x.revenue_mean)} of revenue per unit)")
        if p.target_iroas is not None:
            t += f", iROAS {p.target_iroas:.3g}"
        lines.append(t)
    money_bits = []
    if x.weekly_spend is not None:
        money_bits.append(f"weekly spend {money(x.weekly_spend)} with nobody held out")
    if p.break_even_iroas is not None:
        money_bits.append(f"gross margin {pct(x.margin or 0)} (break-even iROAS {p.break_even_iroas:.3g})")
    if money_bits:
        lines.append("; ".join(money_bits))
    lines.append(f"{x.power * 100:.3g}% power, two-sided alpha {x.alpha:g}")
    return lines


def tables(p: Plan, *, compact: bool = False) -> list[Table]:
    """Every table of the plan, in reading order; `compact` (the terminal) leaves the no-CUPED figures out of the grid."""
    x = p.inputs
    if p.cuped and compact:
        ratio = sum(c.mde / c.mde_cuped for c in p.cells) / len(p.cells)
        which = f"with CUPED; without it about {ratio:.2f} times these"
    else:
        which = "with CUPED; without in brackets" if p.cuped else "no pre-period covariate"
    out = [_grid(p, f"Smallest detectable difference in revenue per unit between the arms ({which}; "
                    f"% of revenue per unit {money(x.revenue_mean)})",
                 (lambda c: f"{num(c.mde_cuped)} ({num(c.mde)}) {num(c.mde_relative_cuped * 100)}%")
                 if p.cuped and not compact
                 else (lambda c: f"{num(c.mde_cuped)} {num(c.mde_relative_cuped * 100)}%"))]
    if p.summaries:
        has_profit = any(s.profit_forgone is not None for s in p.summaries)
        head = ["holdout", "weeks", "exact", "no CUPED" if p.cuped else "", "read weekly",
                "holdout units", "revenue forgone"] + (["profit forgone"] if has_profit else [])
        rows = []
        for s in p.summaries:
            row = [pct(s.share), str(s.weeks), f"{s.weeks_needed:.1f}", f"{s.weeks_needed_raw:.1f}" if p.cuped else "",
                   f"{s.weeks_needed_weekly_reading:.1f}", money(s.share * x.weekly_units * s.weeks),
                   money(s.revenue_forgone)]
            if has_profit:
                row.append(money(s.profit_forgone) if s.profit_forgone is not None else "")
            rows.append(row)
        if not p.cuped:
            head.pop(3)
            for r in rows:
                r.pop(3)
        out.append(Table("Weeks each holdout share needs for the target, and what those weeks cost "
                         "(revenue the holdout does not get if the channel works as targeted; profit is net of "
                         "the spend saved on the holdout, negative when the saving is larger)", head, rows))
    if x.weekly_spend is not None:
        if p.break_even_iroas is not None:
            out.append(_grid(p, f"Smallest iROAS distinguishable from zero / from break-even "
                                f"({p.break_even_iroas:.3g})",
                             lambda c: f"{num(c.iroas_vs_zero or 0)} / {num(c.iroas_vs_break_even or 0)}"))
        else:
            out.append(_grid(p, "Smallest iROAS distinguishable from zero (give --margin for break-even)",
                             lambda c: num(c.iroas_vs_zero or 0)))
    return out


def weekly_reading_line(p: Plan) -> str:
    ratio = p.anytime_factor / p.z_alpha
    s = p.summaries[0] if p.summaries else None
    more = (f"; to keep the same detectable effect it needs {s.weeks_needed_weekly_reading / s.weeks_needed:.2f} "
            "times as many weeks") if s else ""
    return (f"Reading the result every week: the anytime-valid interval is {ratio:.2f} times as wide as the "
            f"fixed-horizon one at the planned end ({p.anytime_factor:.3g} vs {p.z_alpha:.3g} standard errors){more}. "
            "Reading only once, at the planned end, keeps the fixed-horizon width.")


def _text_table(t: Table) -> str:
    widths = [max(len(r[i]) for r in [t.header, *t.rows]) for i in range(len(t.header))]
    fmt = lambda r: "  ".join(v.ljust(w) if i == 0 else v.rjust(w) for i, (v, w) in enumerate(zip(r, widths)))  # noqa: E731
    return "\n".join([*textwrap.wrap(t.title, WIDTH), fmt(t.header), *(fmt(r).rstrip() for r in t.rows)])


def render_text(p: Plan) -> str:
    rec = p.recommendation
    wrap = lambda text, first="", rest="  ": textwrap.wrap(text, WIDTH, initial_indent=first, subsequent_indent=rest)  # noqa: E731
    parts = ["armlock plan: " + headline(p)[0], *("  " + line for line in headline(p)[1:]), "",
             *wrap(f"Recommendation [{_STATUS_WORD[rec.status]}]: {rec.sentence}"), ""]
    if p.estimates:
        parts += ["Estimated from the pre-period files:",
                  *(f"  {e.name}: {money(e.value) if abs(e.value) >= 1 else f'{e.value:.4g}'} ({e.how})"
                    for e in p.estimates), ""]
    for t in tables(p, compact=True):
        parts += [_text_table(t), ""]
    parts += [*wrap(weekly_reading_line(p)), "", "Assumptions:"]
    for a in p.assumptions:
        parts += wrap(a, "  - ", "    ")
    if p.notes:
        parts += ["", "Notes:"]
        for n in p.notes:
            parts += wrap(n, "  - ", "    ")
    return "\n".join(parts) + "\n"


def _md_cell(v: str) -> str:
    return v.replace("|", "\\|")


def render_markdown(p: Plan) -> str:
    rec = p.recommendation
    parts = ["# Holdout plan", "", *(f"- {line}" for line in headline(p)), "",
             f"**Recommendation ({rec.status}):** {rec.sentence}", ""]
    if p.estimates:
        parts += ["## Estimated from the pre-period files", "",
                  *(f"- {e.name}: {e.value:.6g} ({e.how})" for e in p.estimates), ""]
    for t in tables(p):
        parts += [f"**{t.title}**", "", "| " + " | ".join(_md_cell(h) for h in t.header) + " |",
                  "|" + "|".join(["---"] + ["---:"] * (len(t.header) - 1)) + "|",
                  *("| " + " | ".join(_md_cell(v) for v in r) + " |" for r in t.rows), ""]
    parts += [weekly_reading_line(p), "", "## Assumptions", "", *(f"- {a}" for a in p.assumptions)]
    if p.notes:
        parts += ["", "## Notes", "", *(f"- {n}" for n in p.notes)]
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
