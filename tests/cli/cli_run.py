"""Runs the armlock CLI as a user would, capturing exit code, stdout and stderr.

`run_cli` runs it inside the test process (`tests/inputs/inprocess.py`: the same `main`, argv, stdin,
stdout and stderr, and working folder), which saves the 1-2 s of imports a fresh interpreter costs
per call. `process=True` (or `ARMLOCK_TEST_PROCESS=1` for every call) starts a real
`python -m armlock` instead: the handful of smoke tests that prove the installed entry point works
use it.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import Any

from tests.inputs.inprocess import run_inprocess


def run_cli(cwd: Path, *args: str, stdin: str | bytes | None = None, text: bool = True,
            timeout: float = 300, process: bool = False) -> subprocess.CompletedProcess[Any]:
    if process or os.environ.get("ARMLOCK_TEST_PROCESS") == "1":
        return run_cli_process(cwd, *args, stdin=stdin, text=text, timeout=timeout)
    data = stdin.encode("utf-8") if isinstance(stdin, str) else (stdin or b"")
    res = run_inprocess(cwd, *args, stdin=data)
    argv = [sys.executable, "-m", "armlock", *args]
    if text:  # as subprocess's text mode: decoded, universal newlines
        out = res.stdout.decode("utf-8").replace("\r\n", "\n").replace("\r", "\n")
        err = res.stderr.replace("\r\n", "\n").replace("\r", "\n")
        return subprocess.CompletedProcess(argv, res.returncode, out, err)
    return subprocess.CompletedProcess(argv, res.returncode, res.stdout, res.stderr.encode("utf-8"))


def run_cli_process(cwd: Path, *args: str, stdin: str | bytes | None = None, text: bool = True,
                    timeout: float = 300) -> subprocess.CompletedProcess[Any]:
    """`python -m armlock ARGS` in a fresh interpreter, in `cwd`."""
    if isinstance(stdin, str) and not text:
        stdin = stdin.encode("utf-8")
    return subprocess.run([sys.executable, "-m", "armlock", *args], cwd=cwd, input=stdin,
                          capture_output=True, text=text, timeout=timeout, check=False)
