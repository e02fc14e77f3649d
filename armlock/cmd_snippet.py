"""The `armlock snippet` command: render the browser snippet for a spec to stdout or a file."""

from __future__ import annotations

from pathlib import Path

import typer

from armlock.assign.module import render_module
from armlock.assign.snippet import render_snippet

from .common import emit, open_spec
from .options import ACCEPT_CHANGED_SPLIT, SPEC, OneOf


FORMS = ("html", "js", "module")
FORM = OneOf(FORMS, "form", "--form", listing="html, js or module")


def snippet(
    spec_path: Path = SPEC,
    form: str = typer.Option(
        "html",
        "--form",
        "-f",
        metavar="<html|js|module>",
        parser=FORM,
        autocompletion=FORM.complete,
        help="html: a <script> block to paste into a tag manager's custom HTML tag; js: a file to self-host; "
        "module: an ES module of the split and the server-set id cookie for Node and edge runtimes "
        "(docs/identity.md).",
    ),
    out: Path = typer.Option(
        None, "--out", "-o", help="Write the snippet to this file instead of stdout."
    ),
    accept: bool = ACCEPT_CHANGED_SPLIT,
) -> None:
    """Render the tag-manager snippet that enforces the split in the browser.

    The snippet hashes each visitor exactly as `armlock assign` does, pushes the arm into the
    data layer and offers window.<global_name>.gate(callback) so the vendor's tag runs only for
    the exposed arm(s). Settings come from the spec's [snippet] table.

    Example: armlock snippet --spec spring-retargeting.toml --form html --out armlock-tag.html
    """
    spec = open_spec(spec_path, accept_changed_split=accept)
    text = render_module(spec) if form == "module" else render_snippet(spec, form)
    emit(text, out, what="the snippet",
         done=f"Wrote {out} ({form}, {len(text.encode('utf-8'))} bytes) for experiment "
              f"{spec.name!r}, fingerprint {spec.fingerprint}")


def register(app: typer.Typer) -> None:
    app.command("snippet")(snippet)
