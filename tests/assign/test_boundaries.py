"""Dependency boundaries (DESIGN.md): assign/ uses xxhash + pydantic only and never imports audit/."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import assign

ALLOWED_THIRD_PARTY = {"xxhash", "pydantic"}
FORBIDDEN = {"pandas", "scipy", "numpy", "pyarrow", "audit", "armlock", "typer", "rich", "matplotlib"}


def test_assign_sources_import_nothing_forbidden() -> None:
    root = Path(assign.__file__).parent
    bad = []
    for path in sorted(root.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            bad += [f"{path.name}: {n}" for n in names if n.split(".")[0] in FORBIDDEN]
    assert bad == []


def test_importing_assign_loads_no_heavy_library() -> None:
    code = "import sys, assign, assign.sql, assign.init, assign.lock; print(sorted(m for m in %r if m in sys.modules))" % sorted(FORBIDDEN)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_public_api_is_complete() -> None:
    assert sorted(assign.__all__) == assign.__all__
    for name in assign.__all__:
        assert hasattr(assign, name), name
