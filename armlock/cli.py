"""The `armlock` command: the root typer app, its commands and the one place errors become exit codes."""

from __future__ import annotations

import os
import sys
import traceback

import typer

from armlock.assign import ArmlockError, __version__
from armlock.assign.errors import EXIT_INTERNAL

from . import cmd_assign, cmd_snippet, cmd_spec
from . import cmd_demo, cmd_history
from . import cmd_audit

app = typer.Typer(
    name="armlock",
    help=(
        "armlock: the plumbing of a user-level advertising holdout test.\n\n"
        "A spec file fixes the split (salt + arms); `assign` and the browser snippet apply it "
        "identically everywhere; `audit` checks weekly that the split is healthy.\n\n"
        "Example: armlock init spring-retargeting --holdout-share 0.1"
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"armlock {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    """armlock: deterministic holdout assignment, tag snippet and split-health audit."""


cmd_spec.register(app)
cmd_assign.register(app)
cmd_snippet.register(app)
cmd_history.register(app)
cmd_demo.register(app)
cmd_audit.register(app)


def main() -> None:
    """Console entry point: run the app; expected failures print `Error: ...` and exit non-zero."""
    try:
        app()
    except ArmlockError as exc:
        typer.echo(f"Error: {exc}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        typer.echo("Error: interrupted", err=True)
        sys.exit(130)
    except BrokenPipeError:
        sys.stderr.close()
        sys.exit(0)
    except Exception as exc:  # a bug: say so plainly, keep the traceback for whoever debugs it
        if os.environ.get("ARMLOCK_DEBUG"):
            traceback.print_exc()
        typer.echo(f"Error: internal error in armlock ({type(exc).__name__}: {exc}); "
                   "rerun with ARMLOCK_DEBUG=1 for the traceback and please report it", err=True)
        sys.exit(EXIT_INTERNAL)
