"""The card's folders install under `armlock.*`: a user's own audit.py or assign.py cannot shadow them."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path


FOLDERS = ("plan", "assign", "snippets", "audit", "readout")
ROOT = Path(__file__).resolve().parents[2]


def test_user_files_named_like_the_folders_are_never_imported(tmp_path: Path) -> None:
    for name in FOLDERS:
        (tmp_path / f"{name}.py").write_text(f'raise SystemExit("shadowed by the user\'s {name}.py")\n')
    code = ("import armlock.cli, armlock.assign, armlock.audit.run, armlock.audit.report_html, "
            "armlock.snippets, armlock.plan, armlock.readout; print('ok')")
    run = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=False)
    assert (run.returncode, run.stdout.strip(), run.stderr) == (0, "ok", "")
    help_run = subprocess.run([sys.executable, "-m", "armlock", "--help"], cwd=tmp_path,
                              capture_output=True, text=True, check=False)
    assert help_run.returncode == 0 and "shadowed" not in help_run.stderr


def test_sources_import_the_folders_only_through_the_namespace() -> None:
    """`import audit` or `from assign import ...` in armlock's own code would reach a user's file."""
    bad = []
    for folder in (*FOLDERS, "armlock"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.Import):
                    names = [a.name for a in node.names]
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    names = [node.module]
                else:
                    continue
                bad += [f"{path.relative_to(ROOT)}: {n}" for n in names if n.split(".")[0] in FOLDERS]
    assert bad == []


def test_installed_packages_sit_under_armlock() -> None:
    import armlock.assign
    import armlock.audit

    assert Path(armlock.assign.__file__).parent.name == "assign"
    assert armlock.audit.__name__ == "armlock.audit" and armlock.__name__ == "armlock"
