"""Runs `python -m armlock ...` in a folder as a user would, capturing exit code, stdout and stderr."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from typing import Any


def run_cli(cwd: Path, *args: str, stdin: str | bytes | None = None, text: bool = True,
            timeout: float = 300) -> subprocess.CompletedProcess[Any]:
    if isinstance(stdin, str) and not text:
        stdin = stdin.encode("utf-8")
    return subprocess.run([sys.executable, "-m", "armlock", *args], cwd=cwd, input=stdin,
                          capture_output=True, text=text, timeout=timeout, check=False)
