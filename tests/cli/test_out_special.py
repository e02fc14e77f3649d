"""Writing a report or arms to a device or a named pipe writes through it and never replaces it.

Atomic output (a temporary file renamed over the target) must not be applied to /dev/null,
/dev/stdout or a named pipe: a rename would replace the device node itself with a regular file.
The tests use a named pipe in a temporary folder (never the machine's own /dev/null).
"""

from __future__ import annotations

import os
import stat
import threading
from pathlib import Path

import pytest

from armlock.shared.files import in_place, write_atomic
from tests.cli.cli_run import run_cli

pytestmark = pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need a POSIX system")


def _reader(fifo: Path, got: list[bytes]) -> threading.Thread:
    def read() -> None:
        with open(fifo, "rb") as f:
            got.append(f.read())
    t = threading.Thread(target=read, daemon=True)
    t.start()
    return t


def test_write_atomic_writes_through_a_pipe_and_keeps_it(tmp_path: Path) -> None:
    fifo = tmp_path / "out.pipe"
    os.mkfifo(fifo)
    assert in_place(fifo) and not in_place(tmp_path / "plain.txt") and not in_place(tmp_path)
    got: list[bytes] = []
    t = _reader(fifo, got)
    write_atomic(fifo, "hello\n", what="a test")
    t.join(10)
    assert got == [b"hello\n"]
    assert stat.S_ISFIFO(os.stat(fifo).st_mode)  # still a pipe, not a regular file
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.pipe"]  # no temporary file left


def test_assign_out_to_a_pipe_keeps_the_pipe(tmp_path: Path) -> None:
    assert run_cli(tmp_path, "init", "pipe-test", "--holdout-share", "0.1").returncode == 0
    fifo = tmp_path / "arms.pipe"
    os.mkfifo(fifo)
    got: list[bytes] = []
    t = _reader(fifo, got)
    r = run_cli(tmp_path, "assign", "--spec", "pipe-test.toml", "--out", str(fifo), stdin="a\nb\n", text=False)
    t.join(10)
    assert r.returncode == 0, r.stderr
    assert got and got[0].splitlines()[0] == b"unit_id,bucket,arm" and len(got[0].splitlines()) == 3
    assert stat.S_ISFIFO(os.stat(fifo).st_mode)
