"""`armlock overview`: the page for all tests of a folder, as JSON and as HTML checked in headless Chromium."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from tests.cli.cli_run import run_cli

from armlock.assign import load_spec
from armlock.shared.history import record, record_readout

from .browser import open_page
from .fixtures import HOSTILE, weekly

SPEC = '''format = 1
name = "{name}"
salt = "{salt}"
start = 2026-02-24T00:00:00Z
{end}
[[arms]]
name = "holdout"
weight = 1000

[[arms]]
name = "exposed"
weight = 9000

[readout]
planned_units = {units}
'''


def _spec(folder: Path, name: str, salt: str, end: str = "", units: int = 0) -> Path:
    p = folder / f"{name}.toml"
    p.write_text(SPEC.format(name=name, salt=salt, end=f"end = {end}" if end else "", units=units), encoding="utf-8")
    return p


@pytest.fixture
def folder(tmp_path: Path) -> Path:
    """Four invented tests: one failing with a history and reports, one passing with a readout
    decision and a planned end, one never audited, one whose history file is damaged."""
    d = tmp_path / "specs"
    d.mkdir()
    failing = _spec(d, "homeware-retargeting", "salt-a", end="2026-04-21T00:00:00Z", units=80_000)
    fp = load_spec(failing).fingerprint
    for rep in weekly(4):
        rep.fingerprint = fp
        record(d / "homeware-retargeting.toml.history.sqlite", rep)
    (d / "homeware.audit.json").write_text(json.dumps({"schema": "armlock.audit/1", "fingerprint": fp}), encoding="utf-8")
    (d / "unrelated.json").write_text('{"fingerprint": "0000000000000000"}', encoding="utf-8")
    passing = _spec(d, "social-prospecting", "salt-b", end="2026-03-01T00:00:00Z", units=10_000)
    fp2 = load_spec(passing).fingerprint
    rep = weekly(2)[0]
    rep.fingerprint, rep.experiment = fp2, "social-prospecting"
    rep.checks = [c for c in rep.checks if c.status in ("pass", "skipped")]
    rep.verdict = "pass"
    record(d / "social-prospecting.toml.history.sqlite", rep)
    record_readout(d / "social-prospecting.toml.history.sqlite", fingerprint=fp2, as_of=rep.as_of,
                   experiment="social-prospecting", status="pass",
                   figures={"decision": {"label": "decision", "value": "pays", "unit": "text"},
                            "basis": {"label": "interval the decision used", "value": "anytime", "unit": "text"}})
    _spec(d, "affiliates-" + "x" * 60, "salt-c")  # a long name must wrap on a phone
    _spec(d, "email", "salt-d")
    (d / "email.toml.history.sqlite").write_bytes(b"not a database")
    return d


def test_overview_json_and_page(folder: Path) -> None:
    r = run_cli(folder.parent, "overview", "specs", "--out", "site.html")
    assert r.returncode == 0, r.stderr
    doc = json.loads((folder.parent / "site.json").read_text(encoding="utf-8"))
    assert doc["schema"] == "armlock.overview/1" and doc["salt_clashes"] == []
    tests = {t["experiment"]: t for t in doc["tests"]}
    assert len(tests) == 4
    h = tests["homeware-retargeting"]
    assert h["status"] == "fail" and h["as_of"] == "2026-03-23" and h["not_passing"] == "srm, leakage"
    assert h["weeks"] == 4.0 and h["planned_weeks"] == 8.0 and h["planned_units"] == 80_000
    assert h["units"] == 56_000  # the SRM check's unit count of the latest run
    assert "the verdict went from WARN to FAIL" in h["changes"]
    assert [x["name"] for x in h["reports"]] == ["homeware.audit.json"]
    assert h["reports"][0]["href"] == "specs/homeware.audit.json"  # relative to the page
    s = tests["social-prospecting"]
    assert s["status"] == "pass" and s["readout"]["decision_text"] == "pays" and s["readout"]["basis"] == "anytime"
    assert s["reached_end"] is True
    assert tests["email"]["status"] == "unreadable" and "not a readable armlock history" in tests["email"]["notes"][0]
    assert tests["affiliates-" + "x" * 60]["status"] == "none"
    page = (folder.parent / "site.html").read_text(encoding="utf-8")
    assert page.index("homeware-retargeting") < page.index("social-prospecting")  # worst first
    assert "pays (anytime interval)" in page and "4 of 8 planned" in page


def test_copied_salt_is_named_on_the_page(folder: Path) -> None:
    shutil.copy(folder / "email.toml", folder / "email-copy.toml")
    (folder / "email-copy.toml").write_text(
        (folder / "email.toml").read_text(encoding="utf-8").replace('name = "email"', 'name = "email-copy"'),
        encoding="utf-8")
    r = run_cli(folder, "overview", ".")
    assert r.returncode == 0, r.stderr
    doc = json.loads((folder / "overview.json").read_text(encoding="utf-8"))
    assert doc["salt_clashes"] == [["email-copy.toml", "email.toml"]]
    assert "email-copy.toml and email.toml share one salt" in (folder / "overview.html").read_text(encoding="utf-8")


def test_overview_of_a_missing_folder_is_bad_input(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "overview", "nope")
    assert r.returncode == 4 and r.stderr == "Error: nope: not a folder of specs\n"


@pytest.mark.parametrize("width", [390, 1280])
def test_overview_in_chromium(folder: Path, width: int) -> None:
    # a hostile experiment name in a recorded run shows literally, never as markup
    fp = load_spec(folder / "email.toml").fingerprint
    (folder / "email.toml.history.sqlite").unlink()
    rep = weekly(1)[0]
    rep.fingerprint, rep.experiment = fp, HOSTILE[0]
    rep.checks[0].title = HOSTILE[1]
    rep.checks[0].status = rep.verdict = "fail"
    record(folder / "email.toml.history.sqlite", rep)
    assert run_cli(folder.parent, "overview", "specs").returncode == 0
    with open_page(folder / "overview.html", width) as (page, seen):
        assert page.evaluate("() => document.documentElement.scrollWidth") <= width  # no sideways scroll
        cards = page.evaluate("() => [...document.querySelectorAll('section[data-status]')].map(s => s.dataset.status)")
        assert cards == ["fail", "fail", "none", "pass"]  # worst first
        text = page.evaluate("() => document.body.innerText")
        assert HOSTILE[1] in text and "pays (anytime interval)" in text
        small = page.evaluate("() => Math.min(...[...document.querySelectorAll('main *')].filter(e => "
                              "e.childNodes.length && [...e.childNodes].some(n => n.nodeType === 3 && n.textContent.trim()))"
                              ".map(e => parseFloat(getComputedStyle(e).fontSize)))")
        assert small >= 12, f"smallest text is {small}px"
        links = page.evaluate("() => [...document.querySelectorAll('.links a')].map(a => a.href)")
        assert links and all(x.startswith("file:") and x.endswith("homeware.audit.json") for x in links)
        page.screenshot(path=str(folder / f"overview-{width}.png"), full_page=True)
    assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                    "failed_requests": []}
