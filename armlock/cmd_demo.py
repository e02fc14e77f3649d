"""`armlock demo`: an invented shop's twelve-week holdout test, audited week by week, in one folder."""

from __future__ import annotations

import textwrap
from pathlib import Path

import typer

from armlock.shared.words import status_word

from .common import err
from .demo import SHOP, SITE, build_demo


def demo(
    folder: Path = typer.Argument(Path("armlock-demo"), metavar="DIR", help="Folder to write the demo into; an existing one must be empty or an earlier demo."),
    clean: bool = typer.Option(False, "--clean", help="Inject no fault: the healthy version of the same test."),
    server_ids: bool = typer.Option(
        False, "--server-ids",
        help="The shop's server sets the id cookie (docs/identity.md): the browser family that caps "
             "script-written cookies no longer churns ids; the other faults stay."),
) -> None:
    """Build an invented shop's twelve-week holdout test and audit it week by week.

    Writes a spec, twelve weeks of synthetic visits, exposures and identity links (with realistic
    faults unless --clean), the browser snippet, a weekly audit history, and the HTML and JSON
    report of the last week. Everything in it is invented.

    Example: armlock demo my-first-demo
    """
    err(f"Building the invented demo shop {SHOP} in {folder} ...")
    res = build_demo(folder, clean=clean, server_ids=server_ids)
    typer.echo(f"armlock demo: {SHOP}, a made-up shop at {SITE}, 10% held out from a retargeting vendor.")
    injected = "no faults injected" if clean else "faults injected"
    if server_ids:
        injected += "; ids set by the shop's server"
    typer.echo(f"Audited {res.weeks} weeks ({injected}); "
               f"last week's verdict: {status_word(res.verdict)}. {res.verdict_text}")
    for line in res.findings:
        typer.echo(textwrap.fill(line, width=100, initial_indent="  - ", subsequent_indent="    "))
    typer.echo("")
    typer.echo(textwrap.fill(f"Readout of the last week (armlock readout): {res.readout_headline}", width=100,
                             subsequent_indent="  "))
    typer.echo(textwrap.fill(f"The true incremental revenue, known here by construction, is "
                             f"USD {res.true_incremental_revenue:,.0f}.", width=100, subsequent_indent="  "))
    typer.echo("")
    typer.echo("Files:")
    width = max(len(k) for k in res.files)
    for label, path in res.files.items():
        typer.echo(f"  {label.ljust(width)}  {path}")
    typer.echo("")
    report = res.files["report (html)"]
    typer.echo(f"Open the report in a browser: xdg-open {report}  (macOS: open {report})")
    typer.echo(f"The readout page:             xdg-open {res.files['readout (html)']}")
    typer.echo(f"Week-by-week trend:           armlock history --spec {res.files['spec']}")
    typer.echo(f"Done in {res.seconds:.1f} s. The demo's findings are expected: exit code 0.")


def register(app: typer.Typer) -> None:
    app.command("demo")(demo)
