"""A throw-away PostgreSQL server for the history tests: initdb + pg_ctl in a temporary folder.

Uses the Debian package's binaries (`apt-get install postgresql`: /usr/lib/postgresql/<version>/bin,
or initdb/pg_ctl on PATH). PostgreSQL refuses to run as root, so as root the server runs as the
package's `postgres` user. Without the binaries the tests skip, saying why; under CI=true that is
a failure (CI installs the package: `.ci/run`).
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest


def _binaries() -> tuple[str, str] | None:
    found = [shutil.which("initdb"), shutil.which("pg_ctl")]
    if all(found):
        return found[0], found[1]  # type: ignore[return-value]
    for d in sorted(glob.glob("/usr/lib/postgresql/*/bin"), reverse=True):
        if os.path.exists(f"{d}/initdb") and os.path.exists(f"{d}/pg_ctl"):
            return f"{d}/initdb", f"{d}/pg_ctl"
    return None


def _skip(why: str) -> None:
    if os.environ.get("CI") == "true":
        pytest.fail(f"{why}, but CI=true: the PostgreSQL history must be tested against a real server")
    pytest.skip(why)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextmanager
def postgres_server() -> Iterator[str]:
    """Start a server on 127.0.0.1 (trust authentication, no fsync: a test cluster) and yield its URL."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        _skip("psycopg is not installed (pip install 'armlock[postgres]')")
    bins = _binaries()
    if bins is None:
        _skip("PostgreSQL's initdb and pg_ctl are not installed (apt-get install postgresql)")
    initdb, pg_ctl = bins  # type: ignore[misc]
    as_user: list[str] = []
    root = tempfile.mkdtemp(prefix="armlock-pg-")
    if os.geteuid() == 0:
        try:
            import pwd

            pw = pwd.getpwnam("postgres")
        except KeyError:
            _skip("running as root and there is no 'postgres' user to run the server as")
        os.chown(root, pw.pw_uid, pw.pw_gid)
        as_user = ["runuser", "-u", "postgres", "--"]
    data, port = f"{root}/data", free_port()
    run = lambda *a: subprocess.run([*as_user, *a], capture_output=True, text=True, timeout=120)  # noqa: E731
    r = run(initdb, "-D", data, "-U", "armlock", "-A", "trust", "--no-sync", "-E", "UTF8")
    if r.returncode:
        pytest.fail(f"initdb failed: {r.stderr[-800:]}")
    r = run(pg_ctl, "-D", data, "-l", f"{root}/server.log", "-w", "-t", "60", "-o",
            f"-F -p {port} -k {root} -c listen_addresses=127.0.0.1", "start")
    if r.returncode:
        log = Path(f"{root}/server.log").read_text(errors="replace")[-800:] if Path(f"{root}/server.log").exists() else ""
        pytest.fail(f"pg_ctl start failed: {r.stderr[-800:]} {log}")
    try:
        yield f"postgresql://armlock@127.0.0.1:{port}/postgres"
    finally:
        run(pg_ctl, "-D", data, "-m", "immediate", "-w", "stop")
        shutil.rmtree(root, ignore_errors=True)
