"""`armlock demo` as a new user runs it: one command, a folder of invented files, a report that opens clean."""

from __future__ import annotations

import json
import re
import shutil
import sqlite3
import subprocess
from pathlib import Path

import pytest

from tests.cli.cli_run import run_cli

from armlock.assign import load_spec
from armlock.audit.model import AuditReport
from tests.report.browser import open_page

CHARTS = {"srm": 2, "srm_segments": 0, "integrity": 0, "leakage": 1, "churn": 1, "balance": 1, "freshness": 0, "history": 1}
COUNT_CHARTS = """() => Object.fromEntries([...document.querySelectorAll('section[data-check]')]
    .map(s => [s.dataset.check, [...s.querySelectorAll('svg[data-chart]')]
    .filter(c => c.getBoundingClientRect().width > 0).length]))"""  # the drawing shown at this width


run = run_cli


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, subprocess.CompletedProcess[str]]:
    cwd = tmp_path_factory.mktemp("newuser")
    return cwd, run(cwd, "demo", process=True)  # the README's first command, in a real process


def test_demo_runs_in_a_fresh_folder_and_says_what_it_found(demo: tuple[Path, subprocess.CompletedProcess[str]]) -> None:
    cwd, r = demo
    assert r.returncode == 0, r.stderr
    out = r.stdout
    assert "Quillmoss Homewares (invented)" in out and "shop.example" in out
    assert "last week's verdict: FAIL." in out
    findings = [ln for ln in out.splitlines() if ln.startswith("  - ")]
    assert [f.split(":")[0] for f in findings] == ["  - FAIL Leakage (holdout reached by the vendor)",
                                                   "  - FAIL Identity churn (customers in several arms)"]
    # each finding: what was found and the next clause (pre-exposure for leakage), one sentence
    block = out.split("Files:")[0]
    assert "exposed before their first assignment or before the start" in block
    assert block.count("  - ") == 2 and block.rstrip().endswith(".")
    assert "xdg-open armlock-demo/report.html" in out
    assert "armlock history --spec armlock-demo/quillmoss-retargeting.toml" in out
    for line in out.split("Files:\n")[1].split("\n\n")[0].splitlines():
        path = cwd / line.split()[-1]
        assert path.is_file() and path.stat().st_size > 0, line
    assert str(cwd) not in out  # relative paths only, as the user typed them


def test_demo_files_are_marked_invented_and_consistent(demo: tuple[Path, subprocess.CompletedProcess[str]]) -> None:
    folder = demo[0] / "armlock-demo"
    assert "INVENTED" in (folder / "README.txt").read_text(encoding="utf-8")
    spec_text = (folder / "quillmoss-retargeting.toml").read_text(encoding="utf-8")
    assert spec_text.startswith("# INVENTED demo scenario")
    spec = load_spec(folder / "quillmoss-retargeting.toml")
    assert "INVENTED" in spec.description and spec.weights == (1000, 9000)
    rep = AuditReport.model_validate(json.loads((folder / "report.json").read_text(encoding="utf-8")))
    assert rep.fingerprint == spec.fingerprint and rep.as_of == "2026-03-29"
    status = {c.id: c.status for c in rep.checks}
    assert status["leakage"] == "fail" and status["churn"] == "fail" and status["srm"] == "pass"
    with sqlite3.connect(folder / "quillmoss-retargeting.toml.history.sqlite") as conn:
        rows = conn.execute("SELECT as_of FROM runs ORDER BY as_of").fetchall()
    assert len(rows) == 12 and rows[0][0] == "2026-01-11" and rows[-1][0] == "2026-03-29"
    html_tag = (folder / "snippet" / "armlock-tag.html").read_text(encoding="utf-8")
    assert html_tag.lstrip().startswith("<script") and spec.salt in html_tag
    import pyarrow.parquet as pq

    visits = pq.read_table(folder / "logs" / "visits.parquet")
    assert {"unit_id", "first_seen", "arm", "browser_family"} <= set(visits.column_names)
    assert visits.num_rows > 50_000


def test_demo_report_opens_clean_in_chromium(demo: tuple[Path, subprocess.CompletedProcess[str]], tmp_path: Path) -> None:
    report = demo[0] / "armlock-demo" / "report.html"
    for width in (390, 1280):
        with open_page(report, width) as (page, seen):
            assert page.evaluate(COUNT_CHARTS) == CHARTS
            assert page.evaluate("() => document.documentElement.scrollWidth") <= width
            assert "FAIL" in page.inner_text(".verdict")
            page.screenshot(path=str(tmp_path / f"demo-{width}.png"), full_page=True)
        assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                        "failed_requests": []}


def test_demo_rerun_replaces_history_rows_and_clean_passes(demo: tuple[Path, subprocess.CompletedProcess[str]],
                                                           tmp_path: Path) -> None:
    cwd = tmp_path  # a copy: the other tests keep reading the faulted demo, in any order
    shutil.copytree(demo[0] / "armlock-demo", cwd / "armlock-demo")
    r = run(cwd, "demo", "--clean")
    assert r.returncode == 0, r.stderr
    assert "last week's verdict: PASS." in r.stdout and "no faults injected" in r.stdout
    with sqlite3.connect(cwd / "armlock-demo" / "quillmoss-retargeting.toml.history.sqlite") as conn:
        verdicts = [v for (v,) in conn.execute("SELECT verdict FROM runs ORDER BY as_of")]
    assert verdicts == ["pass"] * 12  # the same 12 as-of dates, replaced, not duplicated
    h = run(cwd, "history", "--spec", "armlock-demo/quillmoss-retargeting.toml")
    assert h.returncode == 0 and "12 run(s)" in h.stdout


def test_demo_refuses_a_folder_that_is_not_a_demo(tmp_path: Path) -> None:
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me", encoding="utf-8")
    r = run(tmp_path, "demo", "mine")
    assert r.returncode == 4
    assert r.stderr.endswith("Error: mine: exists and is not an armlock demo folder (no README.txt of a demo); "
                             "choose an empty or new DIR so nothing of yours is overwritten\n")
    assert sorted(p.name for p in (tmp_path / "mine").iterdir()) == ["notes.txt"]


# --- the README's demo section and tour, and the library example (docs/library.md), are a real run -

README = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
LIBRARY = (Path(__file__).resolve().parents[2] / "docs" / "library.md").read_text(encoding="utf-8")  # linked from the tour


def _readme_block(after: str, lang: str, text: str = README) -> str:
    start = text.index(f"```{lang}\n", text.index(after)) + len(lang) + 4
    return text[start:text.index("```", start)]


def test_readme_demo_output_is_what_the_demo_prints(demo: tuple[Path, subprocess.CompletedProcess[str]]) -> None:
    block = _readme_block("## What the demo shows", "console")
    assert block.startswith("$ armlock demo\n")
    printed = demo[1].stderr + demo[1].stdout
    seconds = re.compile(r"Done in [\d.]+ s\.")  # the only line that differs between runs
    assert seconds.sub("Done in N s.", block.split("\n", 1)[1]) == seconds.sub("Done in N s.", printed)


def test_readme_tour_runs_on_the_demo_files(demo: tuple[Path, subprocess.CompletedProcess[str]], tmp_path: Path) -> None:
    import shlex

    shutil.copytree(demo[0] / "armlock-demo", tmp_path / "armlock-demo")
    lines = _readme_block("## A short tour", "sh").replace("\\\n", " ").splitlines()
    commands = [shlex.split(ln, comments=True) for ln in lines if ln.strip()]
    assert len(commands) == 7
    for words in commands:
        stdin = None
        if words[0] == "printf":  # printf '...' | armlock ...: the ids go to stdin
            stdin, words = words[1].replace("\\n", "\n"), words[3:]
        assert words[0] == "armlock", words
        r = run(tmp_path, *words[1:], stdin=stdin)
        assert r.returncode == 0, (words, r.stderr)
        if stdin:
            assert r.stdout.splitlines()[0] == "unit_id,bucket,arm" and len(r.stdout.splitlines()) == 3
    assert (tmp_path / "arms.parquet").is_file() and (tmp_path / "spring-retargeting.toml").is_file()
    assert (tmp_path / "holdout-ids.txt").read_text(encoding="utf-8").count("\n") > 1000  # the holdout list


def test_readme_library_example_is_correct(demo: tuple[Path, subprocess.CompletedProcess[str]],
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    import ast

    monkeypatch.chdir(demo[0])
    code = _readme_block("As a library", "python", LIBRARY)
    scope: dict[str, object] = {}
    for line in code.splitlines():
        stmt, _, comment = line.partition("#")
        if not stmt.strip():
            continue
        if "=" in stmt.split("(")[0] or stmt.startswith(("from ", "import ")):
            exec(stmt, scope)  # noqa: S102 - the README's own example
            continue
        said = re.match(r"\s*(\[.*?\]|'[^']*'|\d+)", comment)
        assert said, line
        assert eval(stmt, scope) == ast.literal_eval(said.group(1)), line  # noqa: S307
    message = re.search(r"`bucket\(spec, \"visitor-1\"\)` raises `TypeError: (.*?)`", LIBRARY, flags=re.S)
    assert message
    with pytest.raises(TypeError) as exc:
        eval('bucket(spec, "visitor-1")', scope)  # noqa: S307
    assert str(exc.value) == " ".join(message.group(1).split())


def test_readme_history_example_is_the_demos_history(demo: tuple[Path, subprocess.CompletedProcess[str]]) -> None:
    block = _readme_block("### The history: `--record` and `armlock history`", "console").splitlines()
    assert block[0] == "$ armlock history --spec armlock-demo/quillmoss-retargeting.toml"
    r = run(demo[0], *block[0].split()[2:])
    assert r.returncode == 0, r.stderr
    printed = r.stdout.splitlines()
    shown = [ln for ln in block[1:] if ln != "..."]
    assert all(ln in printed for ln in shown), [ln for ln in shown if ln not in printed]
    assert shown[-1] == printed[-1]


def test_demo_prints_the_readout_headline_and_its_page_opens_clean(
        demo: tuple[Path, subprocess.CompletedProcess[str]], tmp_path: Path) -> None:
    cwd, r = demo
    out = r.stdout
    assert "Readout of the last week (armlock readout): NOT TRUSTWORTHY" in out
    # another test may rerun the demo with --clean in this folder: read the page's own status
    status = json.loads((cwd / "armlock-demo" / "readout.json").read_text(encoding="utf-8"))["status"]
    word = {"fail": "FAIL: not trustworthy", "warn": "WARN: read with caution", "pass": "PASS: trustworthy split"}[status]
    assert "The true incremental revenue, known here by construction" in out
    assert "xdg-open armlock-demo/readout.html" in out
    page_file = cwd / "armlock-demo" / "readout.html"
    for width in (390, 1280):
        with open_page(page_file, width) as (page, seen):
            charts = page.evaluate("() => [...document.querySelectorAll('svg[data-chart]')]"
                                   ".filter(s => s.getBoundingClientRect().width > 0).map(s => s.dataset.chart)")
            suffix = "-narrow" if width < 544 else ""  # a phone is shown the narrow drawings
            assert charts == [f"readout-roas{suffix}", f"readout-looks{suffix}", f"readout-arms{suffix}"]
            assert page.evaluate("() => document.documentElement.scrollWidth") <= width
            assert page.inner_text(".verdict").startswith("Audit gate: " + word)
            assert page.inner_text("#decision").startswith(("PAYS", "DOES NOT PAY", "NOT YET KNOWN"))
            page.screenshot(path=str(tmp_path / f"readout-{width}.png"), full_page=True)
        assert seen == {"console_errors": [], "page_errors": [], "dialogs": [], "non_file_requests": [],
                        "failed_requests": []}
