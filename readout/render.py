"""Reports of a ReadoutReport: terminal text, markdown for a ticket, and the versioned JSON."""

from __future__ import annotations

import functools
import textwrap
from collections.abc import Callable
from typing import Any

from armlock.shared.report import Table
from armlock.shared.text import json_text, md_table, md_text, strip_controls, text_table
from armlock.shared.words import ANSWER_WORD, STATUS_WORD, fixed, format_p, percent_fixed

from .model import Interval, ReadoutReport

MARK = STATUS_WORD  # one word per status in every output (shared/words.py)
WIDTH = 100  # the terminal report's sentences wrap here (tables keep their own width)


def span(iv: Interval | None, f: Callable[[float | None], str] = fixed, anytime: bool = False) -> str:
    if iv is None:
        return "-"
    lo, hi = (iv.anytime_lo, iv.anytime_hi) if anytime else (iv.lo, iv.hi)
    if lo is None and hi is None:
        return "-"
    return f"{f(lo)} to {f(hi) if hi is not None else 'unbounded'}"


def _digits(metric: str) -> int:
    return 4 if metric in ("conversion", "orders_per_unit") else 2


def arms_table(r: ReadoutReport) -> Table:
    rows = [[a.name, a.role, a.units, a.buyers, percent_fixed(a.conversion.value, 2), a.orders, fixed(a.revenue),
             fixed(a.revenue_per_unit.value, 3), fixed(a.revenue_per_unit.se, 3), fixed(a.aov.value),
             percent_fixed(a.exposure_rate)] for a in r.arms]
    return Table(title=f"Per arm (revenue in {r.money.currency}, net of refunds)",
                 columns=["arm", "role", "units", "buyers", "conversion", "orders", "revenue", "revenue/unit",
                          "SE", "AOV", "exposed"], rows=rows)


def effects_table(r: ReadoutReport) -> Table:
    level = round(100 * (1 - r.settings.get("alpha", 0.05)))
    holm = len({e.arm for e in r.effects}) > 1  # Holm across exposed arms only when there are several
    rows = []
    for e in r.effects:
        d = _digits(e.metric)
        rows.append([f"{e.label}{' *' if e.primary else ''}", f"{e.arm} vs {e.versus}", e.method,
                     fixed(e.absolute.value, d), span(e.absolute, functools.partial(fixed, digits=d)),
                     span(e.absolute, functools.partial(fixed, digits=d), anytime=True),
                     percent_fixed(e.relative.value) if e.relative else "-", e.absolute.p,
                     *([e.p_holm] if holm else []), fixed(e.mde, d)])
    return Table(title="Effects (exposed - holdout); * = primary estimate",
                 columns=["metric", "arms", "method", "difference", f"{level}% interval", "anytime interval",
                          "relative", "p", *(["p (Holm, across arms)"] if holm else []), "MDE"], rows=rows)


def money_table(r: ReadoutReport) -> Table:
    m, cur = r.money, r.money.currency
    rows: list[list[Any]] = [
        [f"incremental revenue ({cur})", fixed(m.incremental_revenue.value, 0), span(m.incremental_revenue, lambda v: fixed(v, 0)),
         span(m.incremental_revenue, lambda v: fixed(v, 0), anytime=True)],
        [f"incremental profit ({cur}, margin {m.margin:g})", fixed(m.incremental_profit.value, 0),
         span(m.incremental_profit, lambda v: fixed(v, 0)), span(m.incremental_profit, lambda v: fixed(v, 0), anytime=True)],
        ["incremental buyers", fixed(m.incremental_buyers.value, 0), span(m.incremental_buyers, lambda v: fixed(v, 0)), "-"],
        [f"spend ({cur})", fixed(m.spend, 0), "-", "-"],
        ["iROAS (incremental revenue / spend)", fixed(m.iroas.value if m.iroas else None), span(m.iroas),
         span(m.iroas, anytime=True)],
        ["ROI ((incremental profit - spend) / spend)", percent_fixed(m.roi.value if m.roi else None, 0), span(m.roi, lambda v: percent_fixed(v, 0)),
         span(m.roi, lambda v: percent_fixed(v, 0), anytime=True)],
        [f"cost per incremental buyer ({cur})", fixed(m.cost_per_incremental_buyer.value if m.cost_per_incremental_buyer else None),
         span(m.cost_per_incremental_buyer), "-"],
        [f"attributed revenue ({cur})", fixed(m.attributed_revenue, 0), "-", "-"],
        ["attributed ROAS", fixed(m.attributed_roas), "-", "-"],
        ["incremental / attributed revenue", fixed(m.incremental_to_attributed.value if m.incremental_to_attributed else None),
         span(m.incremental_to_attributed), span(m.incremental_to_attributed, anytime=True)],
    ]
    level = round(100 * (1 - r.settings.get("alpha", 0.05)))
    return Table(title="Did it pay? (all exposed arms against the holdout; spend taken as known)",
                 columns=["figure", "estimate", f"{level}% interval", "anytime interval"], rows=rows)


def exposure_table(r: ReadoutReport) -> Table | None:
    if not r.exposure:
        return None
    rows = [[x.arm, percent_fixed(x.exposure_rate_exposed), percent_fixed(x.exposure_rate_holdout, 2), fixed(x.per_exposed_unit.value, 3),
             span(x.per_exposed_unit, lambda v: fixed(v, 3)), span(x.per_exposed_unit, lambda v: fixed(v, 3), anytime=True),
             x.per_exposed_unit.p] for x in r.exposure]
    return Table(title="Effect on the exposed (Wald / complier average causal effect), revenue per exposed unit",
                 columns=["arm", "exposed share", "holdout reached", "per exposed unit", "fixed interval",
                          "anytime interval", "p"], rows=rows)


def looks_table(r: ReadoutReport) -> Table:
    """Each look's estimate with its anytime interval; the fixed interval only at the planned final look
    (the one look where it is valid, as the decision and the history read it)."""
    def fixed_span(lk: Any) -> str:
        if not (r.decision.final_look and lk.date == r.as_of):
            return "-"
        return span(Interval(value=None, lo=lk.lo, hi=lk.hi), lambda v: fixed(v, 3))

    rows = [[lk.date, sum(lk.units.values()), fixed(lk.difference, 3),
             span(Interval(value=None, anytime_lo=lk.anytime_lo, anytime_hi=lk.anytime_hi), lambda v: fixed(v, 3),
                  anytime=True), fixed_span(lk)] for lk in r.looks]
    return Table(title="Revenue per unit difference at each look (primary estimate)",
                 columns=["as of", "units", "difference", "anytime interval", "fixed interval (final look only)"],
                 rows=rows)


def tables(r: ReadoutReport) -> list[Table]:
    out = [arms_table(r), effects_table(r), money_table(r)]
    ex = exposure_table(r)
    if ex is not None:
        out.append(ex)
    if r.looks:
        out.append(looks_table(r))
    return out


def _adjust_line(r: ReadoutReport) -> str | None:
    a = r.adjustment
    if a is None:
        return "No covariate adjustment: the raw difference (Welch) is the primary estimate."
    red = percent_fixed(a.variance_reduction) if a.variance_reduction is not None else "-"
    return (f"CUPED with {', '.join(a.covariates)} (pooled theta {', '.join(f'{t:.4g}' for t in a.theta)}) "
            f"reduced the variance by {red}; the adjusted estimate is primary (chosen in the spec, before the data).")


def decision_word(r: ReadoutReport) -> str:
    """PAYS, DOES NOT PAY, NOT YET KNOWN (or NOT YET KNOWN (withheld by the audit gate))."""
    d = r.decision
    return ANSWER_WORD[d.answer] + (" (withheld by the audit gate)" if d.withheld else "")


def decision_lines(r: ReadoutReport) -> list[str]:
    """The decision as the first lines of a report: answer, reason, basis and break-even, action."""
    d = r.decision
    basis = ("fixed-horizon interval (this is the planned final look)" if d.basis == "fixed"
             else "anytime interval (valid at every look before the planned final one)")
    p = f"; p of iROAS = break-even {format_p(d.p_breakeven)}" if d.p_breakeven is not None else ""
    return [f"Does the channel pay? {decision_word(r)}", d.reason,
            f"Read on the {d.level}% {basis}; break-even iROAS {fixed(d.breakeven_iroas)} ({d.breakeven_source}){p}.",
            f"What to do: {d.action}"]


def render_text(r: ReadoutReport) -> str:
    dl = decision_lines(r)
    out = [dl[0], *(textwrap.fill(x, WIDTH) for x in dl[1:]), "",
           f"armlock readout: {r.experiment}   as of {r.as_of}   spec {r.fingerprint}",
           f"audit gate: {MARK[r.status]}{'' if r.trustworthy else ', not trustworthy'}", "",
           textwrap.fill(r.headline, WIDTH), ""]
    bad = [g for g in r.gate if g.status != "pass"]
    if bad:
        out.append("Audit checks that gate this readout:")
        out += [f"  [{MARK[g.status]}] {g.title}: {g.summary.split('; ')[0]}" for g in bad]
        out.append("")
    out += [textwrap.fill(r.estimand, WIDTH), textwrap.fill(r.reading_advice, WIDTH),
            textwrap.fill(_adjust_line(r) or "", WIDTH), ""]
    if r.cautions:
        out.append("Cautions:")
        out += [textwrap.fill(c, WIDTH, initial_indent="  - ", subsequent_indent="    ") for c in r.cautions]
        out.append("")
    if r.input_notes:
        out.append("Input notes:")
        out += [f"  - {n}" for n in r.input_notes]
        out.append("")
    for t in tables(r):
        out.append(text_table(t, indent="  "))
        out.append("")
    if r.exposure:
        out.append("Assumptions of the effect on the exposed:")
        out += [f"  - {a}" for a in r.exposure[0].assumptions]
    return strip_controls("\n".join(out).rstrip()) + "\n"  # data never moves the cursor or retitles the terminal


_md = md_text  # data-derived text made inert (HTML, markdown, autolinks, control characters)


def render_markdown(r: ReadoutReport) -> str:
    dl = decision_lines(r)
    out = [f"**{_md(dl[0])}**", "", *(f"{_md(x)}  " for x in dl[1:]), "",
           f"## armlock readout: {_md(r.experiment)} — audit gate **{MARK[r.status]}**"
           f"{'' if r.trustworthy else ', not trustworthy'}", "",
           f"As of **{r.as_of}** (UTC), spec fingerprint `{r.fingerprint}`, armlock {r.armlock_version}.", "",
           f"> {_md(r.headline)}", ""]
    bad = [g for g in r.gate if g.status != "pass"]
    if bad:
        out += ["**Audit checks that gate this readout**", ""]
        out += [f"- **{MARK[g.status]}** {_md(g.title)}: {_md(g.summary.split('; ')[0])}" for g in bad]
        out.append("")
    out += [_md(r.estimand), "", _md(r.reading_advice), "", _md(_adjust_line(r) or "")]
    if r.cautions:
        out += ["", "**Cautions**", ""] + [f"- {_md(c)}" for c in r.cautions]
    if r.input_notes:
        out += ["", "**Input notes**", ""] + [f"- {_md(n)}" for n in r.input_notes]
    for t in tables(r):
        out += ["", md_table(t)]
    if r.exposure:
        out += ["", "**Assumptions of the effect on the exposed**", ""] + [f"- {_md(a)}" for a in r.exposure[0].assumptions]
    return "\n".join(out) + "\n"


def render_json(r: ReadoutReport) -> str:
    return json_text(r.to_json_dict())


RENDERERS: dict[str, Callable[[ReadoutReport], str]] = {
    "text": render_text,
    "markdown": render_markdown,
    "json": render_json,
}


FORMATS = ("text", "markdown", "json", "html", "finance")


def render_as(report: ReadoutReport, fmt: str) -> str:
    """The readout in any of `FORMATS` (html and finance load matplotlib only when asked for); a
    2x2 readout of two holdouts is added to text, markdown and html."""
    if fmt == "html":
        from armlock.shared.html import esc

        from .report_html import render_html

        text = render_html(report)
        if report.two_holdouts:
            from .factorial import render_two_holdouts

            extra = f'<section class="check"><pre>{esc(render_two_holdouts(report.two_holdouts, "text"))}</pre></section>'
            text = text.replace("</main>", extra + "</main>", 1)
        return text
    if fmt == "finance":  # one printable A4 page: the decision, net contribution, the design
        from .report_finance import render_finance

        return render_finance(report)
    text = RENDERERS[fmt](report)
    if report.two_holdouts and fmt in ("text", "markdown"):
        from .factorial import render_two_holdouts

        text += render_two_holdouts(report.two_holdouts, fmt)
    return text
