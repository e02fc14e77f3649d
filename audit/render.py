"""Reports of an AuditReport: terminal text, markdown for a ticket, and the versioned JSON."""

from __future__ import annotations

import json
import math
import re
import textwrap
from collections.abc import Callable
from typing import Any

from .explain import explanations
from .model import AuditReport, Check, Figure, Table
from .words import STATUS_WORD, column_unit, format_figure, format_value, shown_figures

MAX_ROWS = 15  # rows of a table shown in text and markdown (the JSON has them all)
# Terminal control characters (C0 but the line feed, DEL, C1) and bidirectional overrides: data
# (ids, campaign names, column names) must not move the cursor, recolour or reorder the terminal.
_CONTROL = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def strip_controls(text: str) -> str:
    """Control characters as visible escapes (\\x1b, \\u202e) so a terminal shows, never obeys, them."""
    return _CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}" if ord(m.group()) < 256
                        else f"\\u{ord(m.group()):04x}", text)


_MD_SPECIAL = re.compile(r"([\\`*_\[\]|#~])")
_AUTOLINK = re.compile(r"(?i)(://|www\.|@)")


def md_text(text: str) -> str:
    """Text from data (ids, names, file names, notes) made inert in markdown, on one line: markdown
    syntax backslash-escaped (CommonMark lets any ASCII punctuation be escaped), HTML escaped as
    entities (no raw tag survives), autolinks broken ("://", "www.", "@"), a leading list or heading
    marker escaped, table pipes escaped, control characters shown as escapes. Every markdown output
    (audit, readout, plan) writes data through this one function."""
    s = text.replace("\r\n", " ").replace("\r", " ").replace("\n", " ")
    s = _MD_SPECIAL.sub(r"\\\1", s)
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    s = _AUTOLINK.sub(lambda m: {"://": ":\\/\\/", "@": "\\@"}.get(m.group(1), m.group(1)[:3] + "\\."), s)
    s = re.sub(r"^(\s*)([-+=]|\d+[.)])", lambda m: m.group(1) + "\\" + m.group(2) if m.group(2)[0] in "-+="
               else m.group(1) + m.group(2)[:-1] + "\\" + m.group(2)[-1], s)
    return strip_controls(s)


MARK = STATUS_WORD  # the one word per status (audit/words.py)
fmt_value = format_value


def _fig(f: Figure) -> str:
    return format_figure(f)


def _cells(t: Table) -> tuple[list[str], list[list[str]], int]:
    units = [column_unit(str(c)) for c in t.columns]
    rows = [[format_value(c, units[i]) for i, c in enumerate(r)] for r in t.rows[:MAX_ROWS]]
    return [str(c) for c in t.columns], rows, max(len(t.rows) - MAX_ROWS, 0)


def text_table(t: Table, indent: str = "    ") -> str:
    head, rows, more = _cells(t)
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(head)]
    num = [all(_numeric(r[i]) for r in rows) and bool(rows) for i in range(len(head))]

    def line(cells: list[str]) -> str:
        return indent + "  ".join(c.rjust(w) if n else c.ljust(w) for c, w, n in zip(cells, widths, num)).rstrip()

    out = [indent + t.title, line(head), indent + "  ".join("-" * w for w in widths)]
    out += [line(r) for r in rows]
    if more:
        out.append(f"{indent}... {more:,} more row(s) in the JSON report")
    return "\n".join(out)


def _numeric(s: str) -> bool:
    return s == "-" or s.replace(",", "").replace(".", "").replace("%", "").replace("-", "").replace("e", "").replace("+", "").isdigit()


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


_md_escape = md_text


def md_table(t: Table) -> str:
    head, rows, more = _cells(t)
    out = [f"**{_md_escape(t.title)}**", "", "| " + " | ".join(_md_escape(h) for h in head) + " |",
           "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(_md_escape(c) for c in r) + " |" for r in rows]
    if more:
        out.append(f"\n_{more:,} more row(s) in the JSON report._")
    return "\n".join(out)


def render_markdown(r: AuditReport) -> str:
    unchecked = (" (could not check: " + ", ".join(_md_escape(m.title) for m in r.not_checked) + ")"
                 if r.not_checked else "")
    out = [f"## armlock audit: {_md_escape(r.experiment)} — **{MARK[r.verdict]}**{unchecked}", "",
           f"As of **{r.as_of}** (UTC{', data through ' + r.data_through + ' only' if r.data_through else ''}), spec fingerprint `{r.fingerprint}`, armlock {r.armlock_version}.", "",
           f"> {_md_escape(r.verdict_text)}", "",
           "| check | status | what it means |", "|---|---|---|"]
    out += [f"| {_md_escape(c.title)} | **{MARK[c.status]}** | {_md_escape(c.summary)} |" for c in r.checks]
    if r.input_notes:
        out += ["", "**Input notes**", ""] + [f"- {_md_escape(n)}" for n in r.input_notes]
    for c in r.checks:
        if c.status == "skipped":
            continue
        out += ["", f"### {_md_escape(c.title)} — {MARK[c.status]}", ""]
        if c.figures:
            out += ["| figure | value |", "|---|---|"]
            out += [f"| {_md_escape(f.label)} | {_md_escape(_fig(f))} |" for _, f in shown_figures(c.figures)]
        for t in c.tables:
            out += ["", md_table(t)]
        expl = explanations(c)
        if expl:
            out += [""] + [f"- {_md_escape(e)}" for e in expl]
    return "\n".join(out) + "\n"


def json_text(data: dict[str, Any]) -> str:
    """A report's JSON dict as text, non-finite floats written as null (JSON has no inf or NaN)."""
    def clean(o: Any) -> Any:
        if isinstance(o, float) and not math.isfinite(o):
            return None
        if isinstance(o, dict):
            return {k: clean(v) for k, v in o.items()}
        if isinstance(o, list):
            return [clean(v) for v in o]
        return o

    return json.dumps(clean(data), indent=2, ensure_ascii=False) + "\n"


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


def check_by_id(report: AuditReport, check_id: str) -> Check:
    """The check with this id (for tests and callers)."""
    for c in report.checks:
        if c.id == check_id:
            return c
    raise KeyError(check_id)
