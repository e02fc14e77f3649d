"""Commands about the spec itself: `armlock init` writes one, `armlock check` validates it."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from armlock.assign import SpecError, SplitChangedError, check_lock, load_spec
from armlock.assign.errors import EXIT_BAD_INPUT

from armlock.shared.specfile import write_new_spec

from .common import err, open_spec, warn_box
from .options import ACCEPT_CHANGED_SPLIT, SPEC


def init(
    name: str = typer.Argument(..., help="Experiment name: letters, digits, '.', '_' or '-'."),
    holdout_share: float = typer.Option(0.5, "--holdout-share", help="Share of visitors held out from the vendor, e.g. 0.1 for 10%."),
    arms: str = typer.Option(None, "--arms", help=(
        "All arms as NAME=SHARE,... in order, overriding --holdout-share. A share is a fraction (0.1), "
        "a percentage (10%) or basis points (1000bp); they add up to 1. An arm whose name starts with "
        "'holdout' gets role holdout (the vendor must never reach it), every other arm role exposed; "
        "a test needs at least one of each. E.g. holdout=0.1,exposed_a=0.45,exposed_b=0.45.")),
    out: Path = typer.Option(None, "--out", "-o", help="Where to write the spec (default NAME.toml here)."),
    force: bool = typer.Option(False, "--force", help="Overwrite an existing file."),
) -> None:
    """Write a new experiment spec with a fresh random salt.

    The file is commented so it can be edited by hand before the test starts.

    Example: armlock init spring-retargeting --holdout-share 0.1
    """
    target, spec = write_new_spec(name, holdout_share=holdout_share, arms=arms, out=out, force=force)
    split = ", ".join(f"{a.name} {a.weight / 100:g}%" for a in spec.arms)
    typer.echo(f"Wrote {target}  (arms: {split}; fingerprint {spec.fingerprint})")
    typer.echo("Edit it now if needed; once the test starts, never change salt or weights.")


def check(
    spec_path: Path = SPEC,
    as_json: bool = typer.Option(False, "--json", help="Print the result as JSON (an invalid spec gives valid: false and its errors, exit code 4)."),
    accept: bool = ACCEPT_CHANGED_SPLIT,
) -> None:
    """Validate a spec and print its fingerprint and lock status (does not record the lock).

    Also refuses (exit 4) a salt that another spec in the same folder already uses.

    Example: armlock check --spec spring-retargeting.toml
    """
    from armlock.assign.portfolio import refuse_shared_salt

    notes: list[str] = []
    try:
        spec = load_spec(spec_path, notes=notes)
        refuse_shared_salt(spec_path, spec.salt, notes)  # exit 4 naming both files
    except SpecError as exc:
        if not as_json:
            raise
        head, _, rest = str(exc).partition("\n")
        errors = [line.strip() for line in rest.splitlines() if line.strip()] or [head]
        typer.echo(json.dumps({"spec": str(spec_path), "valid": False, "errors": errors}, indent=2, ensure_ascii=False))
        raise typer.Exit(EXIT_BAD_INPUT) from None
    for note in notes:
        err(note)
    if accept:
        open_spec(spec_path, accept_changed_split=True, record=False)
    lock = check_lock(spec, spec_path, write=False)
    lock_status = "not yet recorded" if lock.recorded is None and lock.status == "recorded" else lock.status
    info = {
        "spec": str(spec_path), "valid": True, "experiment": spec.name, "fingerprint": spec.fingerprint,
        "arms": [{"name": a.name, "weight": a.weight, "role": a.role} for a in spec.arms],
        "start": spec.start.isoformat().replace("+00:00", "Z"),
        "lock": {"path": str(lock.path), "status": lock_status},
    }
    if as_json:
        typer.echo(json.dumps(info, indent=2, ensure_ascii=False))
    else:
        typer.echo(f"{spec_path}: valid spec for experiment {spec.name!r}, fingerprint {spec.fingerprint}")
        for a in spec.arms:
            typer.echo(f"  {a.name:<20} {a.weight:>5} bp  {a.weight / 100:>6g}%  {a.role}")
        typer.echo(f"  lock {lock.path.name}: {lock_status}")
    if lock.status == "changed":
        raise SplitChangedError(lock.warning or "the split changed")
    if lock.warning:
        warn_box(lock.warning)


def register(app: typer.Typer) -> None:
    app.command("init")(init)
    app.command("check")(check)
