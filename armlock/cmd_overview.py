"""`armlock overview`: one static page (HTML and JSON) over a folder of specs and their histories."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from armlock.assign import InputError

from .common import emit


def overview_cmd(
    folder: Path = typer.Argument(..., help="The folder of spec files (*.toml) to show."),
    out: Path = typer.Option(None, "--out", "-o", help="The HTML page to write (default FOLDER/overview.html); the JSON is written beside it with the suffix .json."),
    history: str = typer.Option(None, "--history", metavar="DIR|URL", help="Where the histories are: a folder of history files (default: beside each spec, SPEC.history.sqlite), or the PostgreSQL URL the audits record into."),
) -> None:
    """Write one page for all tests of a folder: each test's latest verdict and what failed, weeks and
    units against its plan, its latest readout decision, and links to its reports.

    Reports are linked when they sit in the spec's folder or the page's folder and carry the spec's
    fingerprint (every armlock report does). The page is static and self-contained; publish it
    wherever the team shares files.

    Example:
      armlock overview specs/ --out site/tests.html
    """
    from .overview import build_overview
    from .overview_html import render_overview

    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder of specs")
    page = out or folder / "overview.html"
    if page.is_dir():
        raise InputError(f"--out {page}: is a folder; give the page's file name, e.g. --out {page / 'overview.html'}")
    if not page.parent.is_dir():
        raise InputError(f"--out {page}: folder {page.parent} does not exist")
    doc = build_overview(folder, page.parent, history)
    data = page.with_suffix(".json")
    emit(json.dumps(doc, indent=2, ensure_ascii=False) + "\n", data, what="the overview's JSON",
         done=f"Wrote {data}")
    worst = [t for t in doc["tests"] if t.get("status") == "fail"]
    emit(render_overview(doc), page, what="the overview page",
         done=f"Wrote {page}: {len(doc['tests'])} test(s), {len(worst)} failing")


def register(app: typer.Typer) -> None:
    app.command("overview")(overview_cmd)
