"""Dependency boundaries (DEVELOPERS.md): assign/ (armlock.assign) uses xxhash + pydantic only, no other armlock layer."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import armlock.assign

ALLOWED_THIRD_PARTY = {"xxhash", "pydantic"}
FORBIDDEN = {"pandas", "scipy", "numpy", "pyarrow", "typer", "rich", "matplotlib", "pyspark"}
# Inside the namespace, the assigner may import only itself (relative imports of level 1).
OTHER_LAYERS = ("armlock.audit", "armlock.plan", "armlock.readout", "armlock.cli", "armlock.cmd_")


def test_assign_sources_import_nothing_forbidden() -> None:
    root = Path(armlock.assign.__file__).parent
    bad = []
    for path in sorted(root.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level >= 2:
                    bad.append(f"{path.name}: relative import beyond assign/ (level {node.level})")
                elif node.level == 0 and node.module:
                    names = [node.module]
            bad += [f"{path.name}: {n}" for n in names if n.split(".")[0] in FORBIDDEN]
            bad += [f"{path.name}: {n}" for n in names if n.startswith(OTHER_LAYERS)]
    assert bad == []


def test_importing_assign_loads_no_heavy_library() -> None:
    code = (
        "import sys, armlock.assign, armlock.assign.sql, armlock.assign.init, armlock.assign.lock; "
        "print(sorted(m for m in sys.modules if m.split('.')[0] in %r or m.startswith(%r)))" % (sorted(FORBIDDEN), OTHER_LAYERS)
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_public_api_is_complete() -> None:
    assert sorted(armlock.assign.__all__) == armlock.assign.__all__
    for name in armlock.assign.__all__:
        assert hasattr(armlock.assign, name), name
