"""Atomic outputs (issue #20): every file armlock writes goes through a temporary file in the same
folder and a rename; a full disk or a kill leaves the previous file untouched; stale temporary
files of a killed run are removed."""

from __future__ import annotations

import errno
import os
from pathlib import Path

import pandas as pd
import pytest

from armlock.assign import InputError
from armlock.common import emit
from armlock.shared.files import TMP_MARK, temp_path, write_atomic
from tests.inputs.helpers import write_demo_logs, write_spec
from tests.inputs.inprocess import run_inprocess


def _temps(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if TMP_MARK in p.name or ".tmp" in p.name)


def test_a_full_disk_leaves_the_previous_report_untouched(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "audit.md"
    out.write_text("last week's report\n", encoding="utf-8")

    def full(fd: int) -> None:
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(InputError, match=r"audit.md: cannot write the report: the disk is full \(nothing was "
                                         r"replaced: any previous file is untouched\)"):
        emit("this week's report\n", out, what="the report", done="")
    assert out.read_text(encoding="utf-8") == "last week's report\n" and _temps(tmp_path) == []


def test_the_file_appears_whole_through_a_rename(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "report.json"
    seen: list[tuple[str, str]] = []
    real = os.replace

    def spy(src: str, dst: str) -> None:
        seen.append((Path(src).name, Path(dst).name))
        assert Path(src).parent == Path(dst).parent  # same folder: the rename is atomic
        real(src, dst)

    monkeypatch.setattr(os, "replace", spy)
    write_atomic(out, "{}\n", what="the report")
    assert seen == [(temp_path(out).name, "report.json")] and out.read_text(encoding="utf-8") == "{}\n"


def test_a_stale_temporary_file_of_a_killed_run_is_removed(tmp_path: Path) -> None:
    out = tmp_path / "audit.md"
    stale = tmp_path / f".audit.md.999999999{TMP_MARK}"  # no such process
    stale.write_text("half a report", encoding="utf-8")
    write_atomic(out, "whole\n", what="the report")
    assert not stale.exists() and out.read_text(encoding="utf-8") == "whole\n"


def test_writing_onto_a_folder_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="it is a folder"):
        write_atomic(tmp_path, "x", what="the report")


@pytest.mark.parametrize("cmd", ["audit", "readout", "snippet", "init", "assign"])
def test_every_command_writes_through_a_temporary_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                       cmd: str) -> None:
    paths = write_demo_logs(tmp_path, units=300)
    spec = write_spec(tmp_path)
    v = pd.read_csv(paths["visits"], dtype=str).head(60)
    pd.DataFrame({"unit_id": v["unit_id"], "order_time": v["first_seen"], "revenue": 10.0}).to_csv(
        tmp_path / "orders.csv", index=False)
    renamed: list[str] = []
    real = os.replace

    def spy(src: str | os.PathLike[str], dst: str | os.PathLike[str]) -> None:
        renamed.append(Path(dst).name)
        real(src, dst)

    monkeypatch.setattr(os, "replace", spy)
    args = {"audit": ["audit", "--spec", spec.name, "--visits", str(paths["visits"]), "--out", "out.txt"],
            "readout": ["readout", "--spec", spec.name, "--visits", str(paths["visits"]), "--orders",
                        "orders.csv", "--out", "out.txt"],
            "snippet": ["snippet", "--spec", spec.name, "--out", "out.txt"],
            "init": ["init", "fresh-test", "--out", "out.txt"],
            "assign": ["assign", "--spec", spec.name, str(paths["visits"]), "--column", "unit_id", "--out", "out.txt"]}
    r = run_inprocess(tmp_path, *args[cmd])  # type: ignore[misc]
    assert r.returncode in (0, 1, 3, 7), r.stderr
    assert "out.txt" in renamed and (tmp_path / "out.txt").stat().st_size > 0
    assert _temps(tmp_path) == []


def test_a_full_disk_under_the_history_says_so(tmp_path: Path) -> None:
    # once: "cannot rollback - no transaction is active", hiding the reason
    import sqlite3

    from armlock.shared.history import _db_error

    err = _db_error(sqlite3.OperationalError("database or disk is full"), tmp_path / "h.sqlite")
    assert "the disk is full (or failing): this run was not recorded and the history is unchanged" in str(err)
