"""The `armlock` command: the root typer app, its commands and the one place errors become exit codes."""

from __future__ import annotations

import errno
import os
import re
import sys
import traceback
from typing import Any, NoReturn

import typer
from typer.core import TyperArgument, TyperCommand, TyperGroup

from armlock.assign import ArmlockError, __version__
from armlock.assign.errors import EXIT_BAD_INPUT, EXIT_INTERNAL

from . import cmd_assign, cmd_plan, cmd_snippet, cmd_spec
from . import cmd_demo, cmd_history, cmd_overview
from . import cmd_audit, cmd_readout

# The commands in the order of the job: plan it, fix the split, apply it, audit it, read it out.
# A command not listed here (a new one) is shown after these, in the order it was registered.
JOB_ORDER = ("plan", "init", "check", "assign", "snippet", "audit", "readout", "history", "overview", "demo")


def usage_name(param: Any) -> str:
    """An argument as the usage line shows it: NAME when required, [NAME] when optional."""
    name = (param.metavar or param.name or "").strip("[]").upper()
    return name if param.required else f"[{name}]"


class ArmlockCommand(TyperCommand):
    """One command's help: usage in one notation, example paragraphs printed as written."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        for param in self.params:  # arguments read the same in the usage line and in their list
            if isinstance(param, TyperArgument):
                param.metavar = (param.metavar or param.name or "").strip("[]").upper()

    def collect_usage_pieces(self, ctx: Any) -> list[str]:
        pieces = [self.options_metavar] if self.options_metavar else []
        for param in self.get_params(ctx):
            if isinstance(param, TyperArgument):
                pieces.append(usage_name(param))
        return pieces

    def format_help_text(self, ctx: Any, formatter: Any) -> None:
        # An "Example:" paragraph keeps its line breaks: click leaves a paragraph that starts
        # with a lone \b line unwrapped.
        if self.help:
            self.help = re.sub(r"(?m)^([ \t]*)(Examples?:)", "\\1\b\n\\1\\2", self.help)
        super().format_help_text(ctx, formatter)


class ArmlockGroup(TyperGroup):
    """The root command: lists its commands in the job's order (JOB_ORDER)."""

    def list_commands(self, ctx: Any) -> list[str]:
        names = list(self.commands)
        rank = {n: i for i, n in enumerate(JOB_ORDER)}
        return sorted(names, key=lambda n: (rank.get(n, len(JOB_ORDER)), names.index(n)))


app = typer.Typer(
    name="armlock",
    cls=ArmlockGroup,
    help=(
        "armlock: the plumbing of a user-level advertising holdout test.\n\n"
        "`plan` sizes the test (holdout share, weeks, cost); a spec file fixes the split (salt + arms); "
        "`assign` and the browser snippet apply it identically everywhere; `audit` checks weekly that the "
        "split is healthy; `readout` says at the end whether the channel caused sales and paid.\n\n"
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


cmd_plan.register(app)
cmd_spec.register(app)
cmd_assign.register(app)
cmd_snippet.register(app)
cmd_history.register(app)
cmd_overview.register(app)
cmd_demo.register(app)
cmd_audit.register(app)
cmd_readout.register(app)
for _info in app.registered_commands:  # every command, however registered, gets the same help layout
    if _info.cls in (None, TyperCommand):
        _info.cls = ArmlockCommand


def main() -> None:
    """Console entry point: run the app; expected failures print `Error: ...` and exit non-zero."""
    try:
        app()
    except ArmlockError as exc:
        from armlock.audit.render import strip_controls  # a file name or value never drives the terminal

        typer.echo(f"Error: {strip_controls(str(exc))}", err=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        typer.echo("Error: interrupted", err=True)
        sys.exit(130)
    except BrokenPipeError:
        sys.stderr.close()
        sys.exit(0)
    except OSError as exc:  # a path the user gave that the system refuses (too long, no space, no access)
        from armlock.audit.render import strip_controls

        if exc.filename is None or exc.errno not in _USER_PATH_ERRORS:
            _internal(exc)
        name = str(exc.filename)
        shown = name if len(name) <= 120 else name[:60] + f"...({len(name):,} characters)..." + name[-20:]
        typer.echo(f"Error: {strip_controls(shown)}: {exc.strerror or exc}", err=True)
        sys.exit(EXIT_BAD_INPUT)
    except Exception as exc:
        _internal(exc)


# OS errors about a path the user named: an input error (exit 4), never an internal one
_USER_PATH_ERRORS = {errno.ENAMETOOLONG, errno.ENOSPC, errno.EDQUOT, errno.EACCES, errno.EPERM, errno.EROFS,
                     errno.ENOENT, errno.ENOTDIR, errno.EISDIR, errno.ELOOP}


def _internal(exc: BaseException) -> NoReturn:
    """A bug: say so plainly (control characters shown, not obeyed), keep the traceback for whoever debugs it."""
    from armlock.audit.render import strip_controls

    if os.environ.get("ARMLOCK_DEBUG"):
        traceback.print_exc()
    typer.echo(strip_controls(f"Error: internal error in armlock ({type(exc).__name__}: {exc}); "
                              "rerun with ARMLOCK_DEBUG=1 for the traceback and please report it"), err=True)
    sys.exit(EXIT_INTERNAL)
