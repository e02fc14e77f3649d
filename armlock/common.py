"""Shared CLI plumbing: stderr messages, opening a spec with its lock check, progress bars."""

from __future__ import annotations

import errno
import os
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import typer

from armlock.assign import InputError, Spec, SplitChangedError, check_lock, load_spec
from armlock.assign.lock import LockCheck, accept_change

SPEC_HELP = "The experiment spec file (TOML), as written by `armlock init`."
# Every command that reads a spec takes this option and passes it to `open_spec`.
ACCEPT_CHANGED_SPLIT: Any = typer.Option(
    False, "--accept-changed-split",
    help="Confirm that the spec's salt or weights were changed on purpose: record the new split in the "
         "lock file and go on (without it, a changed split stops with exit code 6; once the test has "
         "started, its audits then fail naming the change).")


# Where the rows are counted: every command that reads the logs (audit, readout) takes these three.
ENGINE: Any = typer.Option(
    "duckdb", "--engine",
    help="Where the rows are counted: duckdb (this machine, default: memory grows with units, not rows; "
         "spills to disk), pandas (this machine, every exposure row in memory) or spark (needs pip install "
         "'armlock[spark]' and Java 17; uses the active SparkSession, else starts one).")
SPARK_MASTER: Any = typer.Option(
    None, "--spark-master",
    help="With --engine spark and no active session: the master to start one on (default local[*]; "
         "e.g. yarn, spark://host:7077).")
SPARK_CONF: Any = typer.Option(
    None, "--spark-conf", metavar="KEY=VALUE",
    help="With --engine spark: a Spark setting for the session it starts (repeatable), e.g. "
         "spark.executor.memory=8g. spark-defaults.conf (SPARK_CONF_DIR), PYSPARK_SUBMIT_ARGS and "
         "spark-submit --conf also apply.")
MEMORY_LIMIT: Any = typer.Option(
    None, "--memory-limit", metavar="SIZE",
    help="With --engine duckdb: the most memory DuckDB may take, e.g. 4GB (default: 80% of this "
         "machine's memory); beyond it, it spills to --temp-dir.")
TEMP_DIR: Any = typer.Option(
    None, "--temp-dir", metavar="DIR",
    help="With --engine duckdb: the folder DuckDB spills to (default: a new folder in the system's "
         "temporary directory, removed afterwards).")
ENGINE_NAMES = ("duckdb", "pandas", "spark")


def engine_settings(engine: str, spark_master: str | None, spark_conf: list[str] | None,
                    memory_limit: str | None = None, temp_dir: str | None = None) -> dict[str, str]:
    """Check --engine with the Spark and DuckDB settings together (usage errors, exit 2); the Spark settings."""
    conf = {}
    for item in spark_conf or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise typer.BadParameter(f"{item!r} is not KEY=VALUE, e.g. spark.executor.memory=8g",
                                     param_hint="--spark-conf")
        conf[key.strip()] = value
    if engine not in ENGINE_NAMES:
        raise typer.BadParameter(f"unknown engine {engine!r}; choose duckdb, pandas or spark", param_hint="--engine")
    if engine != "spark" and (spark_master or conf):
        raise typer.BadParameter("--spark-master and --spark-conf need --engine spark", param_hint="--engine")
    if engine != "duckdb" and (memory_limit or temp_dir):
        raise typer.BadParameter("--memory-limit and --temp-dir need --engine duckdb", param_hint="--engine")
    return conf


def err(text: str) -> None:
    """One message on stderr, control characters shown as escapes (data never drives the terminal)."""
    from armlock.audit.render import strip_controls

    typer.echo(strip_controls(text), err=True)


TMP_MARK = ".armlock-tmp"  # temporary files are ".<name>.<pid>.armlock-tmp" beside their target


def in_place(out: Path) -> bool:
    """True for an existing path that is not a regular file or folder (/dev/null, /dev/stdout, a named
    pipe): it is written in place, because a rename would replace the device or pipe itself."""
    try:
        return out.exists() and not out.is_file() and not out.is_dir()
    except OSError:
        return False


def temp_path(out: Path) -> Path:
    """The temporary file a write to `out` goes through: same folder (so the rename is atomic), this process's id."""
    return out.with_name(f".{out.name}.{os.getpid()}{TMP_MARK}")


def remove_stale_temps(out: Path) -> None:
    """Remove temporary files of `out` left by a run that was killed (its process is gone)."""
    try:
        leftovers = list(out.parent.glob(f".{out.name}.*{TMP_MARK}"))
    except OSError:
        return
    for tmp in leftovers:
        pid = tmp.name[len(out.name) + 2:-len(TMP_MARK)]
        if pid.isdigit() and int(pid) != os.getpid() and not _alive(int(pid)):
            try:
                tmp.unlink()
            except OSError:
                pass


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # it exists but belongs to someone else
        return True
    return True


def os_error_text(exc: OSError) -> str:
    """Why a write failed, in words (a full disk says so; the previous file is untouched)."""
    if exc.errno == errno.ENOSPC:
        return "the disk is full (nothing was replaced: any previous file is untouched)"
    if exc.errno == errno.EDQUOT:
        return "the disk quota is exceeded (nothing was replaced: any previous file is untouched)"
    return exc.strerror or str(exc)


def write_atomic(out: Path, data: str | bytes, *, what: str) -> None:
    """Write `data` to `out` through a temporary file in the same folder and a rename, so a kill or
    a full disk never leaves a partial file in place of the previous one. Every file armlock writes
    goes through here (or, streamed, through `temp_path` and `os.replace`: `io_ids.ArmWriter`)."""
    if out.is_dir():
        raise InputError(f"{out}: cannot write {what}: it is a folder; give a file name")
    payload = data.encode("utf-8") if isinstance(data, str) else data
    if in_place(out):
        try:
            with open(out, "wb") as f:
                f.write(payload)
        except OSError as exc:
            raise InputError(f"{out}: cannot write {what}: {os_error_text(exc)}") from None
        return
    remove_stale_temps(out)
    tmp = temp_path(out)
    try:
        with open(tmp, "wb") as f:
            f.write(payload)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, out)
    except OSError as exc:
        try:
            tmp.unlink(missing_ok=True)
        except OSError:
            pass
        raise InputError(f"{out}: cannot write {what}: {os_error_text(exc)}") from None


def emit(text: str, out: Path | None, *, what: str, done: str) -> None:
    """A report to `out` (atomically, then `done` on stderr) or to stdout; a file that cannot be
    written is an input error naming it and `what` was being written."""
    if out is None:
        typer.echo(text, nl=False)
        return
    write_atomic(out, text, what=what)
    err(done)


def warn_box(text: str) -> None:
    """A loud warning on stderr that a person will not miss."""
    bar = "!" * 78
    colour = sys.stderr.isatty()
    body = "\n".join(f"! {line}" for line in text.splitlines())
    msg = f"{bar}\n! WARNING\n{body}\n{bar}"
    typer.echo(typer.style(msg, fg="red", bold=True) if colour else msg, err=True)


def open_spec(path: Path, *, accept_changed_split: bool = False, record: bool = True) -> Spec:
    """Load and validate a spec, then check it against the lock recorded at first use.

    The one entry point every command that uses a spec goes through: the first use records the
    fingerprint (unless `record` is False); a changed split raises SplitChangedError (exit 6)
    unless `accept_changed_split`, which records the change. A leading byte-order mark in the
    spec file is removed and noted on stderr.
    """
    return open_spec_and_lock(path, accept_changed_split=accept_changed_split, record=record)[0]


def open_spec_and_lock(path: Path, *, accept_changed_split: bool = False,
                       record: bool = True) -> tuple[Spec, LockCheck]:
    """`open_spec`, also returning what the lock says (the audit reads its recorded changes)."""
    notes: list[str] = []
    spec = load_spec(path, notes=notes)
    for note in notes:
        err(note)
    lock = check_lock(spec, path, write=record)
    if lock.status == "changed":
        if not accept_changed_split:
            raise SplitChangedError(lock.warning or "the split changed")
        warn_box(lock.warning or "the split changed")
        lock = accept_change(spec, lock)
        err(f"Recorded the new split (fingerprint {spec.fingerprint}) in {lock.path}.")
    if lock.warning:
        warn_box(lock.warning)
    return spec, lock


@contextmanager
def progress(total: int | None, label: str) -> Iterator[Any]:
    """A progress bar on stderr, quiet when stderr is not a terminal. Yields `advance(n)`."""
    if not sys.stderr.isatty():
        yield lambda n: None
        return
    from rich.console import Console
    from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn

    cols = [TextColumn(label), BarColumn(), DownloadColumn(), TimeRemainingColumn()]
    with Progress(*cols, console=Console(stderr=True), transient=True) as bar:
        task = bar.add_task(label, total=total)
        yield lambda n: bar.advance(task, n)
