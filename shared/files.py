"""Files armlock writes: through a temporary file and a rename, so a kill or a full disk never leaves a partial file.

Devices and named pipes (/dev/null, /dev/stdout, a FIFO) are written in place: a rename would
replace the device itself. Temporary files of a killed run are removed by the next write.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

from armlock.assign import InputError

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
    goes through here (or, streamed, through `temp_path` and `os.replace`: `shared.ids.ArmWriter`)."""
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
