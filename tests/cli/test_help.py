"""Every command has help that says what it does, with an example (checked over the live app)."""

from __future__ import annotations

import typer
from typer.testing import CliRunner

from armlock.cli import app


def _commands() -> list[str]:
    group = typer.main.get_command(app)
    return sorted(group.commands)  # type: ignore[attr-defined]


def test_core_commands_registered() -> None:
    assert {"init", "check", "assign"} <= set(_commands())


def test_every_command_has_help_with_an_example() -> None:
    runner = CliRunner()
    missing = []
    for name in _commands():
        result = runner.invoke(app, [name, "--help"])
        assert result.exit_code == 0, name
        if "Example" not in result.output:
            missing.append(name)
    assert missing == []


def test_root_help_lists_commands() -> None:
    out = CliRunner().invoke(app, ["--help"]).output
    for name in _commands():
        assert name in out
