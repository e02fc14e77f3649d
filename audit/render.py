"""Reports of an AuditReport: terminal text, markdown for a ticket, the versioned JSON, and the HTML page by name (`render_as`)."""

from __future__ import annotations

import textwrap
from collections.abc import Callable
from typing import Any

from armlock.assign.spec_audit import AuditThresholds
from armlock.shared.report import Check, Figure
from armlock.shared.text import json_text, md_table, md_text, strip_controls, text_table

from armlock.shared.words import STATUS_WORD, format_figure, shown_figures

from .explain import explanations
from .model import AuditReport

MARK = STATUS_WORD  # the one word per status (shared/words.py)


def _fig(f: Figure) -> str:
    return format_figure(f)


def render_text(r: AuditReport) -> str:
    arms = ", ".join(f"{a.name} {a.weight / 100:g}% ({a.role})" for a in r.arms)
    through = f" (data through {r.data_through} only)" if r.data_through else ""
    out = [f"armlock audit: {r.experiment}   as of {r.as_of}{through}   spec {r.fingerprint}",
           f"verdict: {MARK[r.verdict]}  {r.verdict_text}",
           f"arms: {arms}", ""]
    if r.input_notes:
        out.append("Input notes:")
        out += [f"  - {n}" for n in r.input_notes]
        out.append("")
    for c in r.checks:
        out.append(f"[{MARK[c.status]}] {c.title}")
        out.append(f"  {c.summary}")
        if c.status == "skipped":
            out.append("")
            continue
        if c.figures:
            figs = [f for _, f in shown_figures(c.figures)]
            w = max(len(f.label) for f in figs)
            out += [f"    {f.label.ljust(w)}  {_fig(f)}" for f in figs]
        for t in c.tables:
            out.append("")
            out.append(text_table(t))
        for line in explanations(c):
            out.append(textwrap.fill(line, width=100, initial_indent="    * ", subsequent_indent="      "))
        out.append("")
    return strip_controls("\n".join(out).rstrip()) + "\n"


def render_markdown(r: AuditReport) -> str:
    unchecked = (" (could not check: " + ", ".join(md_text(m.title) for m in r.not_checked) + ")"
                 if r.not_checked else "")
    out = [f"## armlock audit: {md_text(r.experiment)} — **{MARK[r.verdict]}**{unchecked}", "",
           f"As of **{r.as_of}** (UTC{', data through ' + r.data_through + ' only' if r.data_through else ''}), spec fingerprint `{r.fingerprint}`, armlock {r.armlock_version}.", "",
           f"> {md_text(r.verdict_text)}", "",
           "| check | status | what it means |", "|---|---|---|"]
    out += [f"| {md_text(c.title)} | **{MARK[c.status]}** | {md_text(c.summary)} |" for c in r.checks]
    if r.input_notes:
        out += ["", "**Input notes**", ""] + [f"- {md_text(n)}" for n in r.input_notes]
    for c in r.checks:
        if c.status == "skipped":
            continue
        out += ["", f"### {md_text(c.title)} — {MARK[c.status]}", ""]
        if c.figures:
            out += ["| figure | value |", "|---|---|"]
            out += [f"| {md_text(f.label)} | {md_text(_fig(f))} |" for _, f in shown_figures(c.figures)]
        for t in c.tables:
            out += ["", md_table(t)]
        expl = explanations(c)
        if expl:
            out += [""] + [f"- {md_text(e)}" for e in expl]
    return "\n".join(out) + "\n"


def render_json(r: AuditReport) -> str:
    return json_text(r.to_json_dict())


RENDERERS: dict[str, Callable[[AuditReport], str]] = {
    "text": render_text,
    "markdown": render_markdown,
    "json": render_json,
}


def render(report: AuditReport, fmt: str) -> str:
    """The report as `fmt`: one of RENDERERS (text | markdown | json)."""
    try:
        return RENDERERS[fmt](report)
    except KeyError:
        raise ValueError(f"unknown report format {fmt!r}; choose one of {', '.join(RENDERERS)}") from None


FORMATS = (*RENDERERS, "html")


def render_as(report: AuditReport, fmt: str, history: list[dict[str, Any]] | None = None,
              thresholds: AuditThresholds | None = None) -> str:
    """The report in any of `FORMATS`; html (which loads matplotlib only when asked for) also draws the
    recorded `history` and the spec's `thresholds`."""
    if fmt == "html":
        from .report_html import render_html

        return render_html(report, history, thresholds=thresholds)
    return render(report, fmt)


def check_by_id(report: AuditReport, check_id: str) -> Check:
    """The check with this id (for tests and callers)."""
    for c in report.checks:
        if c.id == check_id:
            return c
    raise KeyError(check_id)
