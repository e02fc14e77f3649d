"""Shared CLI plumbing: stderr messages, opening a spec with its lock check, progress bars."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import typer

from armlock.assign import Spec, check_lock, load_spec

SPEC_HELP = "The experiment spec file (TOML), as written by `armlock init`."


def err(text: str) -> None:
    """One message on stderr."""
    typer.echo(text, err=True)


def warn_box(text: str) -> None:
    """A loud warning on stderr that a person will not miss."""
    bar = "!" * 78
    colour = sys.stderr.isatty()
    body = "\n".join(f"! {line}" for line in text.splitlines())
    msg = f"{bar}\n! WARNING\n{body}\n{bar}"
    typer.echo(typer.style(msg, fg="red", bold=True) if colour else msg, err=True)


def open_spec(path: Path, *, record: bool = True) -> Spec:
    """Load and validate a spec, then compare it with the lock recorded at first use."""
    spec = load_spec(path)
    lock = check_lock(spec, path, write=record)
    if lock.warning:
        warn_box(lock.warning)
    return spec


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
