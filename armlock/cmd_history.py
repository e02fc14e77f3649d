"""`armlock history`: the week-by-week trend of recorded audits and what changed since the last run."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from armlock.shared.history import changes, default_history_path, load, load_readouts, target
from armlock.shared.history_tables import readout_table, trend_table
from armlock.shared.words import NOTHING_CHANGED

from .common import err, open_spec
from .options import ACCEPT_CHANGED_SPLIT, SPEC, format_option

FORMATS = ("text", "json")


def history_cmd(
    spec_path: Path = SPEC,
    history_path: str = typer.Option(None, "--history", help="The history file (default: beside the spec, SPEC.history.sqlite), or a PostgreSQL URL postgresql://USER@HOST/DB that every runner shares (needs pip install 'armlock[postgres]')."),
    fmt: str = format_option(FORMATS, help="text (a table and sentences) or json."),
    accept: bool = ACCEPT_CHANGED_SPLIT,
) -> None:
    """Show the recorded audits of a spec week by week, and what changed since the previous run.

    Runs are recorded by `armlock audit --record`; one row per as-of date.

    Example: armlock history --spec spring-retargeting.toml
    """
    spec = open_spec(spec_path, accept_changed_split=accept)
    path = target(history_path) if history_path else default_history_path(spec_path)
    from armlock.shared.history_pg import shown

    name = shown(path) if isinstance(path, str) else str(path)  # a URL's password is never printed
    runs = load(path, spec.fingerprint)
    readouts = load_readouts(path, spec.fingerprint)
    said = changes(runs[-2], runs[-1], spec.audit.thresholds) if len(runs) >= 2 else []
    if fmt == "json":
        typer.echo(json.dumps({"history": name, "experiment": spec.name,
                               "fingerprint": spec.fingerprint, "runs": runs,
                               "changes_since_previous": said, "readouts": readouts},
                              indent=2, ensure_ascii=False))
        return
    if readouts:
        typer.echo(f"Readout history of {spec.name!r}, {len(readouts)} readout(s) (armlock readout --record):")
        typer.echo("")
        typer.echo(readout_table(readouts))
        typer.echo("")
    if not runs:
        where = ("does not exist yet" if isinstance(path, Path) and not path.exists()
                 else f"has no run of fingerprint {spec.fingerprint}")
        err(f"No audit runs recorded for {spec.name!r}: {name} {where}. "
            "Record one with `armlock audit --spec ... --record`.")
        return
    typer.echo(f"Audit history of {spec.name!r} (fingerprint {spec.fingerprint}), {len(runs)} run(s), from {name}")
    typer.echo("")
    typer.echo(trend_table(runs))
    typer.echo("")
    if len(runs) < 2:
        typer.echo("Only one run is recorded; the next recorded run will say what changed.")
    elif said:
        typer.echo(f"Since {runs[-2]['as_of']} (as of {runs[-1]['as_of']}):")
        for s in said:
            typer.echo(f"  - {s[:1].upper() + s[1:]}")
    else:
        typer.echo(f"Since {runs[-2]['as_of']}: {NOTHING_CHANGED[:1].lower() + NOTHING_CHANGED[1:]}")


def register(app: typer.Typer) -> None:
    app.command("history")(history_cmd)
