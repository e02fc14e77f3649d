"""Shared CLI plumbing: stderr messages, opening a spec with its lock check, progress bars (options: options.py)."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import typer

from armlock.assign import Spec, SplitChangedError, check_lock, load_spec
from armlock.assign.lock import LockCheck, accept_change
from armlock.shared.files import write_atomic

def err(text: str) -> None:
    """One message on stderr, control characters shown as escapes (data never drives the terminal)."""
    from armlock.audit.render import strip_controls

    typer.echo(strip_controls(text), err=True)


def emit(text: str, out: Path | None, *, what: str, done: str) -> None:
    """A report to `out` (atomically, then `done` on stderr) or to stdout; a file that cannot be
    written is an input error naming it and `what` was being written."""
    if out is None:
        typer.echo(text, nl=False)
        return
    write_atomic(out, text, what=what)
    err(done)


def warn_box(text: str) -> None:
    """A loud warning on stderr that a person will not miss."""
    bar = "!" * 78
    colour = sys.stderr.isatty()
    body = "\n".join(f"! {line}" for line in text.splitlines())
    msg = f"{bar}\n! WARNING\n{body}\n{bar}"
    typer.echo(typer.style(msg, fg="red", bold=True) if colour else msg, err=True)


def open_spec(path: Path, *, accept_changed_split: bool = False, record: bool = True) -> Spec:
    """Load and validate a spec, then check it against the lock recorded at first use.

    The one entry point every command that uses a spec goes through: the first use records the
    fingerprint (unless `record` is False); a changed split raises SplitChangedError (exit 6)
    unless `accept_changed_split`, which records the change. A leading byte-order mark in the
    spec file is removed and noted on stderr.
    """
    return open_spec_and_lock(path, accept_changed_split=accept_changed_split, record=record)[0]


def open_spec_and_lock(path: Path, *, accept_changed_split: bool = False,
                       record: bool = True) -> tuple[Spec, LockCheck]:
    """`open_spec`, also returning what the lock says (the audit reads its recorded changes)."""
    notes: list[str] = []
    spec = load_spec(path, notes=notes)
    for note in notes:
        err(note)
    lock = check_lock(spec, path, write=record)
    if lock.status == "changed":
        if not accept_changed_split:
            raise SplitChangedError(lock.warning or "the split changed")
        warn_box(lock.warning or "the split changed")
        lock = accept_change(spec, lock)
        err(f"Recorded the new split (fingerprint {spec.fingerprint}) in {lock.path}.")
    if lock.warning:
        warn_box(lock.warning)
    return spec, lock


@contextmanager
def progress(total: int | None, label: str) -> Iterator[Any]:
    """A progress bar on stderr, quiet when stderr is not a terminal. Yields `advance(n)`."""
    if not sys.stderr.isatty():
        yield lambda n: None
        return
    from rich.console import Console
    from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn

    cols = [TextColumn(label), BarColumn(), DownloadColumn(), TimeRemainingColumn()]
    with Progress(*cols, console=Console(stderr=True), transient=True) as bar:
        task = bar.add_task(label, total=total)
        yield lambda n: bar.advance(task, n)
