"""A folder of specs is a portfolio: `check` and `init` refuse a salt another spec of the folder uses."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from typer.testing import CliRunner

from tests.cli.cli_run import run_cli

from armlock.assign import SpecError
from armlock.assign.portfolio import folder_specs, refuse_shared_salt


def _init(folder: Path, name: str, share: str = "0.1") -> Path:
    r = run_cli(folder, "init", name, "--holdout-share", share)
    assert r.returncode == 0, r.stderr
    return folder / f"{name}.toml"


def test_check_refuses_a_copied_salt_naming_both_files(tmp_path: Path) -> None:
    a = _init(tmp_path, "retargeting")
    _init(tmp_path, "social")
    (tmp_path / "pyproject.toml").write_text('[project]\nname = "x"\n', encoding="utf-8")  # not a spec
    ok = run_cli(tmp_path, "check", "--spec", "social.toml")
    assert ok.returncode == 0, ok.stderr
    copy = tmp_path / "affiliates.toml"
    shutil.copy(a, copy)
    copy.write_text(copy.read_text(encoding="utf-8").replace('name = "retargeting"', 'name = "affiliates"'),
                    encoding="utf-8")
    r = run_cli(tmp_path, "check", "--spec", "affiliates.toml")
    assert r.returncode == 4
    assert r.stderr.startswith("Error: affiliates.toml: its salt is already used by retargeting.toml "
                               "(experiment 'retargeting') in the same folder")
    # both ways round: the original is refused too, naming the copy
    r = run_cli(tmp_path, "check", "--spec", "retargeting.toml")
    assert r.returncode == 4 and "already used by affiliates.toml (experiment 'affiliates')" in r.stderr
    j = run_cli(tmp_path, "check", "--spec", "affiliates.toml", "--json")
    assert j.returncode == 4
    doc = json.loads(j.stdout)
    assert doc["valid"] is False and "retargeting.toml" in doc["errors"][0]


def test_a_broken_toml_sibling_is_noted_not_dropped(tmp_path: Path) -> None:
    _init(tmp_path, "retargeting")
    (tmp_path / "half.toml").write_text("salt = [", encoding="utf-8")
    notes: list[str] = []
    assert [s.name for s in folder_specs(tmp_path, notes=notes)] == ["retargeting"]
    assert notes and "half.toml: not read as a spec of the folder (TOMLDecodeError)" in notes[0]
    r = run_cli(tmp_path, "check", "--spec", "retargeting.toml")
    assert r.returncode == 0 and "half.toml: not read as a spec of the folder" in r.stderr


def test_init_refuses_a_salt_in_use(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A fresh 96-bit salt never clashes in practice; the rule is the same code path, forced here."""
    import armlock.assign.init as init_mod
    from armlock.cli import app

    a = _init(tmp_path, "retargeting")
    salt = next(s.salt for s in folder_specs(tmp_path))
    monkeypatch.setattr(init_mod, "new_salt", lambda: salt)
    monkeypatch.chdir(tmp_path)
    res = CliRunner().invoke(app, ["init", "social"])
    assert isinstance(res.exception, SpecError)  # main() turns it into exit 4 (EXIT_BAD_INPUT)
    assert "its salt is already used by retargeting.toml" in str(res.exception)
    assert not (tmp_path / "social.toml").exists()
    with pytest.raises(Exception, match="its salt is already used by .*retargeting.toml"):
        refuse_shared_salt(tmp_path / "social.toml", salt)
    assert a.exists()
