"""Runs mypy over armlock as it is installed: the folders mapped under `armlock.*` by pyproject's package-dir.

The design card keeps `assign/`, `audit/`, `plan/`, `readout/` and `snippets/` at the top level, but
they install as `armlock.assign`, `armlock.audit`, ...; mypy cannot follow setuptools' editable
import hook, so it would see none of them. This script builds a temporary tree of symbolic links
laid out as installed, runs `mypy -p armlock` there with the project's `[tool.mypy]` settings, and
prints mypy's findings with the repository's own paths. Exit code: mypy's.

Usage: python scripts/typecheck.py
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def link_tree(dest: Path) -> dict[str, str]:
    """Symlinks laid out as the installed packages; returns installed prefix -> repository folder."""
    mapping: dict[str, str] = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))[
        "tool"]["setuptools"]["package-dir"]
    top = dest / "armlock"
    top.mkdir()
    for item in (ROOT / mapping["armlock"]).iterdir():
        if item.name != "__pycache__":
            (top / item.name).symlink_to(item)
    back = {"armlock/": mapping["armlock"].rstrip("/") + "/"}
    for package, folder in mapping.items():
        if package == "armlock":
            continue
        rel = package.split(".", 1)[1].replace(".", "/")
        (top / rel).symlink_to(ROOT / folder)
        back[f"armlock/{rel}/"] = folder.rstrip("/") + "/"
    return back


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="armlock-mypy-") as tmp:
        back = link_tree(Path(tmp))
        env = dict(os.environ, MYPY_CACHE_DIR=str(ROOT / ".mypy_cache"))
        run = subprocess.run([sys.executable, "-m", "mypy", "--config-file", str(ROOT / "pyproject.toml"),
                              "-p", "armlock"], cwd=tmp, env=env, capture_output=True, text=True, check=False)
    for line in (run.stdout + run.stderr).splitlines():
        for installed, folder in sorted(back.items(), key=lambda kv: -len(kv[0])):
            if line.startswith(installed):
                line = folder + line[len(installed):]
                break
        print(line)
    return run.returncode


if __name__ == "__main__":
    raise SystemExit(main())
