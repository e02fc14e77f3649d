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


def _help(*args: str) -> str:
    result = CliRunner().invoke(app, [*args, "--help"], terminal_width=100)
    assert result.exit_code == 0, result.output
    return result.output


def test_root_help_lists_commands_in_the_job_order() -> None:
    from armlock.cli import JOB_ORDER

    out = _help().split("Commands:")[1]
    listed = [line.split()[0] for line in out.splitlines() if line.startswith("  ") and line.strip()]
    assert JOB_ORDER == ("plan", "init", "check", "assign", "snippet", "audit", "readout", "history", "overview", "demo")
    known = [c for c in JOB_ORDER if c in listed]
    assert listed[: len(known)] == known
    assert {"init", "check", "assign", "snippet", "audit", "history", "demo"} <= set(known)


def test_examples_keep_their_line_breaks() -> None:
    out = _help("assign")
    block = out.split("Examples:")[1].split("Arguments:")[0]
    lines = [line.strip() for line in block.strip().splitlines()]
    assert lines and all(line.startswith("armlock assign --spec") for line in lines)
    audit = _help("audit").split("Example:")[1].split("Options:")[0].strip().splitlines()
    assert audit[0].strip().startswith("armlock audit --spec") and audit[0].rstrip().endswith("\\")
    assert audit[1].strip().startswith("--identities")


def test_usage_lines_use_one_notation() -> None:
    assert "Usage: armlock init [OPTIONS] NAME\n" in _help("init")
    assert "Usage: armlock assign [OPTIONS] [FILE|-]\n" in _help("assign")
    assert "Usage: armlock demo [OPTIONS] [DIR]\n" in _help("demo")
    for name in _commands():
        usage = _help(name).splitlines()[0]
        assert "{" not in usage and "[[" not in usage and "<" not in usage, usage


def test_init_arms_help_explains_roles_without_doubled_percent() -> None:
    out = " ".join(_help("init").split())
    assert "%%" not in out
    assert "starts with 'holdout' gets role holdout" in out


def test_demo_help_states_its_default_once() -> None:
    assert _help("demo").count("armlock-demo") == 1
