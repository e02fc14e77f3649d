"""Checks the import contracts of pyproject's [tool.importlinter] over armlock laid out as installed.

import-linter reads the packages from the file system; the design card's folders (`assign/`,
`audit/`, `shared/`, ...) install as `armlock.assign`, `armlock.audit`, ... only through the
package-dir mapping, so this script copies the Python files into a temporary tree laid out as
installed and runs `lint-imports` there. Exit code: lint-imports'.

Usage: python scripts/layers.py
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def copy_tree(dest: Path) -> None:
    """The packages' Python files, laid out as installed (armlock/, armlock/audit/, ...)."""
    mapping: dict[str, str] = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))[
        "tool"]["setuptools"]["package-dir"]
    for package, folder in mapping.items():
        target = dest.joinpath(*package.split("."))
        target.mkdir(parents=True, exist_ok=True)
        for src in (ROOT / folder).glob("*.py"):
            shutil.copy2(src, target / src.name)


def check(tree: Path, capture: bool = False) -> subprocess.CompletedProcess[str]:
    """lint-imports over a tree made by `copy_tree`, with the project's contracts."""
    shutil.copy2(ROOT / "pyproject.toml", tree / "pyproject.toml")
    env = dict(os.environ, PYTHONPATH=str(tree))
    lint = shutil.which("lint-imports") or "lint-imports"
    return subprocess.run([lint, str(tree / "pyproject.toml"), "--no-cache"], cwd=tree, env=env, check=False,
                          capture_output=capture, text=True)


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="armlock-layers-") as tmp:
        copy_tree(Path(tmp))
        return check(Path(tmp)).returncode


if __name__ == "__main__":
    sys.exit(main())
