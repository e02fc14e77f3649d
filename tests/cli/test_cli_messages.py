"""Plain messages for common mistakes on the command line (exit code and the exact words)."""

from __future__ import annotations

import json
from pathlib import Path

from .cli_run import run_cli


def test_init_arms_without_a_holdout_names_the_rule(tmp_path: Path) -> None:
    run = run_cli(tmp_path, "init", "t", "--arms", "control=10%,exposed=90%")
    assert run.returncode == 4
    assert "no arm name starts with 'holdout'" in run.stderr and "holdout=10%,exposed=90%" in run.stderr
    assert not (tmp_path / "t.toml").exists()


def test_init_out_a_folder_is_a_clear_error(tmp_path: Path) -> None:
    run = run_cli(tmp_path, "init", "t", "--out", ".")
    assert run.returncode == 4
    assert run.stderr.strip() == "Error: --out .: is a folder; give the spec's file name, e.g. --out t.toml"


def test_snippet_wrong_form_is_plain(tmp_path: Path) -> None:
    assert run_cli(tmp_path, "init", "t").returncode == 0
    run = run_cli(tmp_path, "snippet", "--spec", "t.toml", "--form", "svg")
    assert run.returncode == 2
    assert "Invalid value for --form: unknown form 'svg'; choose html, js or module" in run.stderr
    assert "Value error" not in run.stderr


def test_check_json_on_an_invalid_spec_prints_json(tmp_path: Path) -> None:
    (tmp_path / "bad.toml").write_text('salt = 1\n', encoding="utf-8")
    run = run_cli(tmp_path, "check", "--spec", "bad.toml", "--json")
    assert run.returncode == 4
    out = json.loads(run.stdout)
    assert out["valid"] is False and out["spec"] == "bad.toml"
    assert "bad.toml: name: required key is missing" in out["errors"]
    missing = json.loads(run_cli(tmp_path, "check", "--spec", "nope.toml", "--json").stdout)
    assert missing["valid"] is False and "spec file not found" in missing["errors"][0]


def test_check_json_on_a_valid_spec(tmp_path: Path) -> None:
    assert run_cli(tmp_path, "init", "t").returncode == 0
    out = json.loads(run_cli(tmp_path, "check", "--spec", "t.toml", "--json").stdout)
    assert out["valid"] is True and [a["role"] for a in out["arms"]] == ["holdout", "exposed"]
