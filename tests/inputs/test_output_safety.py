"""Data never becomes markup or terminal commands: markdown escapes HTML, text shows control characters as escapes."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from armlock.assign import load_spec
from armlock.audit.render import render_markdown, render_text, strip_controls
from armlock.audit.run import run_audit

from .helpers import write_demo_logs, write_spec

HOSTILE = ["<script>alert(1)</script>", '<img src=x onerror="alert(2)">', "\x1b[2J\x1b[31mred", "bell\x07|pipe",
           "rtl\u202eevil"]


def test_campaign_names_from_the_vendor_are_inert(tmp_path: Path) -> None:
    # The vendor's campaign names (and segment values) are data: a hostile one must not run in a
    # ticket that renders markdown, nor clear or recolour the terminal of the person reading the report.
    paths = write_demo_logs(tmp_path, faults=("leakage",))
    e = pd.read_csv(paths["exposures"], dtype=str, keep_default_na=False)
    e["campaign"] = [HOSTILE[i % len(HOSTILE)] for i in range(len(e))]
    e.to_csv(paths["exposures"], index=False)
    rep = run_audit(load_spec(write_spec(tmp_path)), visits=paths["visits"], exposures=paths["exposures"])
    md, text = render_markdown(rep), render_text(rep)
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in md  # the campaign table shows them, escaped
    for raw in ("<script", "<img", "\x1b", "\x07", "\u202e"):
        assert raw not in md, repr(raw)
    for raw in ("\x1b", "\x07", "\u202e"):  # a terminal does not run markup; it obeys control characters
        assert raw not in text, repr(raw)
    assert "\\x1b[2J\\x1b[31mred" in text and "rtl\\u202eevil" in text  # shown, not obeyed


def test_strip_controls_keeps_line_breaks_and_printable_text() -> None:
    assert strip_controls("a\tb\nc\x00d\x9be\u2066f") == "a\\x09b\nc\\x00d\\x9be\\u2066f"
    assert strip_controls("café 😀 | -") == "café 😀 | -"
