"""Runs the armlock CLI inside the test process (fast enough for hundreds of runs): exit code, stdout, stderr."""

from __future__ import annotations

import io
import os
import sys
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from collections.abc import Iterator

from armlock.cli import main


@dataclass
class Result:
    returncode: int
    stdout: bytes
    stderr: str


class _Out(io.TextIOWrapper):
    """A text stdout with a bytes buffer underneath (assign writes to sys.stdout.buffer)."""

    def __init__(self) -> None:
        self.raw_bytes = io.BytesIO()
        super().__init__(self.raw_bytes, encoding="utf-8", newline="", write_through=True)

    def close(self) -> None:  # the CLI may detach or close; keep the bytes readable
        pass


@contextmanager
def _cwd(path: Path) -> Iterator[None]:
    old = os.getcwd()
    os.chdir(path)
    try:
        yield
    finally:
        os.chdir(old)


def run_inprocess(cwd: Path, *args: str, stdin: bytes = b"") -> Result:
    """`armlock ARGS` with `stdin`, in `cwd`; the exit code is the one `armlock.cli.main` exits with."""
    out, err = _Out(), io.StringIO()
    inp = io.TextIOWrapper(io.BytesIO(stdin), encoding="utf-8")
    saved = sys.argv, sys.stdin, sys.stdout, sys.stderr
    sys.argv, sys.stdin, sys.stdout, sys.stderr = ["armlock", *args], inp, out, err
    code = 0
    try:
        with _cwd(cwd):
            main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    finally:
        sys.argv, sys.stdin, sys.stdout, sys.stderr = saved
    try:
        out.flush()
    except ValueError:
        pass
    return Result(code, out.raw_bytes.getvalue(), err.getvalue())
