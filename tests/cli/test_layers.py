"""The layers' import contracts (scripts/layers.py, import-linter): kept by the code, and able to fail."""

from __future__ import annotations

import importlib.util
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _layers():  # type: ignore[no-untyped-def]
    spec = importlib.util.spec_from_file_location("layers_script", ROOT / "scripts" / "layers.py")
    assert spec is not None and spec.loader is not None
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


pytestmark = pytest.mark.skipif(shutil.which("lint-imports") is None, reason="import-linter is a test dependency")


def test_the_code_keeps_every_contract(tmp_path: Path) -> None:
    layers = _layers()
    layers.copy_tree(tmp_path)
    run = layers.check(tmp_path, capture=True)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "4 kept, 0 broken" in run.stdout


def test_each_contract_fails_on_the_import_it_forbids(tmp_path: Path) -> None:
    layers = _layers()
    layers.copy_tree(tmp_path)
    probes = {
        "armlock/shared/keys.py": "import armlock.readout  # the shared layer importing upwards",
        "armlock/plan/weekly.py": "from armlock.audit import holm  # the plan importing its peer",
        "armlock/readout/stats.py": "from armlock.audit.srm import holm  # an audit submodule, not its surface",
        "armlock/assign/sql.py": "import numpy  # assign must stay tiny",
    }
    for path, line in probes.items():
        with (tmp_path / path).open("a", encoding="utf-8") as f:
            f.write("\n" + line + "\n")
    run = layers.check(tmp_path, capture=True)
    assert run.returncode != 0
    assert "0 kept, 4 broken" in run.stdout, run.stdout
    for edge in ("armlock.shared.keys -> armlock.readout", "armlock.plan.weekly -> armlock.audit",
                 "armlock.readout.stats -> armlock.audit.srm", "armlock.assign.sql -> numpy"):
        assert edge in run.stdout
