"""Text kit of every human output: control characters shown, markdown made inert, tables for the terminal and markdown, JSON text."""

from __future__ import annotations

import json
import math
import re
from typing import Any

from .report import Table
from .words import column_unit, format_value

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


def md_table(t: Table) -> str:
    head, rows, more = _cells(t)
    out = [f"**{md_text(t.title)}**", "", "| " + " | ".join(md_text(h) for h in head) + " |",
           "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(md_text(c) for c in r) + " |" for r in rows]
    if more:
        out.append(f"\n_{more:,} more row(s) in the JSON report._")
    return "\n".join(out)


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
