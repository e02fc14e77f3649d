"""Nothing hostile comes out live (issue #20): the audit's, readout's and plan's markdown, rendered by a
CommonMark renderer from the registry (markdown-it-py), holds no HTML, link, image or autolink made
from data; their text outputs and error messages show control characters as escapes."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
from markdown_it import MarkdownIt

from armlock.assign import spec_from_dict
from armlock.audit.render import md_text, render_markdown, render_text
from armlock.audit.synth import generate, generate_orders, write_logs, write_orders
from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.render import render_markdown as plan_markdown
from armlock.plan.render import render_text as plan_text
from armlock.readout.render import RENDERERS as READOUT
from armlock.readout.run import run_readout
from tests.report.fixtures import build_report

PAYLOADS = ["<img src=x onerror=alert(1)>", "<svg onload=alert(2)>", "![t](http://host.invalid/x.png)",
            "[click](javascript:alert(3))", "<https://host.invalid/a>", "http://host.invalid/b",
            "www.host.invalid", "someone@host.invalid", "`code` **bold** _em_ ~~gone~~", "# heading", "- item",
            "1. item", "| a | b |", "&lt;script&gt;", "\x1b]0;title\x07\x1b[2Jcleared", "line\nbreak\r\nmore"]
LIVE = {"html_block", "html_inline", "image", "link_open", "s_open"}
RENDERER = MarkdownIt("commonmark").enable(["table", "strikethrough"])


def live_elements(markdown: str) -> list[str]:
    """Every live element the renderer makes: raw HTML, links (autolinks too), images, strikethrough."""
    found = []
    for tok in RENDERER.parse(markdown):
        for t in [tok, *(tok.children or [])]:
            if t.type in LIVE:
                found.append(f"{t.type}: {t.content or t.attrs}")
    return found


@pytest.mark.parametrize("payload", PAYLOADS)
def test_md_text_leaves_nothing_live(payload: str) -> None:
    for wrap in ("{}", "- {}", "| x | {} |\n|---|---|", "> {}", "**{}**"):
        md = wrap.format(md_text(payload))
        assert live_elements(md) == [], (payload, md)
        assert "\x1b" not in md and "\x07" not in md


def test_the_renderer_would_find_live_elements_unescaped() -> None:
    # the test can fail: the raw payloads are live
    assert live_elements("\n\n".join(PAYLOADS)) != []


def test_audit_markdown_with_hostile_data_is_inert() -> None:
    rep = build_report(hostile=True)
    rep = rep.model_copy(update={"experiment": PAYLOADS[2], "input_notes": PAYLOADS})
    md = render_markdown(rep)
    assert live_elements(md) == []
    assert "\x1b" not in render_text(rep)


@pytest.fixture(scope="module")
def readout(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    spec = spec_from_dict({"name": "md-test", "salt": "invented-md-2026", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 3000}, {"name": "exposed", "weight": 7000}]})
    logs = generate(spec, units=3_000, days=21, seed=31)
    folder = tmp_path_factory.mktemp("md")
    paths = write_logs(logs, folder, "parquet")
    orders = write_orders(generate_orders(spec, logs, days=21, seed=32, base_rate=0.2), folder, fmt="parquet")
    return run_readout(spec, visits=paths["visits"], orders=orders, exposures=paths["exposures"])


def test_readout_markdown_with_hostile_data_is_inert(readout) -> None:  # type: ignore[no-untyped-def]
    arms = [a.model_copy(update={"name": PAYLOADS[i]}) for i, a in enumerate(readout.arms)]
    gate = [g.model_copy(update={"title": PAYLOADS[i % len(PAYLOADS)], "status": "warn"})
            for i, g in enumerate(readout.gate)]
    rep = readout.model_copy(update={"experiment": PAYLOADS[1], "input_notes": PAYLOADS, "cautions": PAYLOADS,
                                     "arms": arms, "gate": gate, "headline": PAYLOADS[5]})
    assert live_elements(READOUT["markdown"](rep)) == []
    text = READOUT["text"](rep)
    assert "\x1b" not in text and "\x07" not in text and "\\x1b" in text


def test_plan_markdown_with_hostile_notes_is_inert() -> None:
    plan = make_plan(PlanInputs(weekly_units=20_000, revenue_mean=7.0, revenue_sd=60.0, effect=0.5),
                     shares=[0.1], weeks=[8])
    plan = dataclasses.replace(plan, notes=PAYLOADS, assumptions=PAYLOADS)
    assert live_elements(plan_markdown(plan)) == []
    assert "\x1b" not in plan_text(plan)


def test_error_messages_show_control_characters_as_escapes(tmp_path: Path) -> None:
    from tests.inputs.inprocess import run_inprocess

    r = run_inprocess(tmp_path, "check", "--spec", "no\x1b[2Jsuch.toml")
    assert r.returncode == 4 and "\x1b" not in r.stderr and "\\x1b" in r.stderr
