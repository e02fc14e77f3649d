"""Issue 23: the lock covers the id sources, so editing them mid-test stops like a changed salt (exit 6)."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path

from armlock.assign import check_lock, load_spec
from armlock.assign.init import render_spec_toml
from armlock.assign.lock import accept_change, changes_after_start, id_fingerprint

from ..cli.cli_run import run_cli

SOURCE = '\n[[snippet.id_sources]]\nkind = "global"\nname = "site.visitor.id"\n'


def write_spec(path: Path, extra: str = "", replace: tuple[str, str] = ("", "")) -> None:
    text = render_spec_toml("ids-test", [("holdout", 1000), ("exposed", 9000)], salt="lock-ids-salt",
                            start=datetime(2026, 1, 5, tzinfo=UTC))
    text = text.replace(*replace) if replace[0] else text
    # TOML: the array of tables goes right after the [snippet] table's keys
    path.write_text(text.replace("\n[snippet.consent]", extra + "\n[snippet.consent]"), encoding="utf-8")


def test_a_new_lock_records_the_id_sources(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    write_spec(p, SOURCE)
    check_lock(load_spec(p), p)
    lock = json.loads((tmp_path / "s.toml.lock").read_text(encoding="utf-8"))
    assert lock["id_sources"] == [["global", "site.visitor.id", ""], ["own_cookie", "armlock_uid", ""]]
    assert lock["id_fingerprint"] == id_fingerprint(load_spec(p))


def test_editing_the_id_sources_after_the_start_stops_with_exit_6(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    write_spec(p)
    check_lock(load_spec(p), p)  # the first use records the lock
    write_spec(p, '\n[[snippet.id_sources]]\nkind = "global"\nname = "site.customer.key"\n')
    proc = run_cli(tmp_path, "check", "--spec", "s.toml")
    assert proc.returncode == 6, proc.stderr
    assert ("the id sources changed from [own_cookie armlock_uid] to "
            "[global site.customer.key, own_cookie armlock_uid]") in proc.stderr
    assert "changes which id is hashed" in proc.stderr and "Traceback" not in proc.stderr
    # the split's fingerprint is the same (the data layer and the audit still match)
    spec = load_spec(p)
    check = check_lock(spec, p)
    assert check.status == "changed" and check.recorded["fingerprint"] == spec.fingerprint  # type: ignore[index]
    done = accept_change(spec, check)
    assert done.status == "same" and check_lock(spec, p).status == "same"
    (said,) = changes_after_start(done)
    assert "the id sources changed" in said


def test_renaming_the_id_cookie_is_a_change_but_moving_it_to_the_server_is_not(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    write_spec(p)
    check_lock(load_spec(p), p)
    # the server keeps every valid id the snippet set: nobody moves, so nothing to confirm
    write_spec(p, replace=('id_from = "script"', 'id_from = "server"'))
    assert load_spec(p).snippet.id_from == "server" and check_lock(load_spec(p), p).status == "same"
    write_spec(p, replace=('cookie_name = "armlock_uid"', 'cookie_name = "shop_id"'))
    changed = check_lock(load_spec(p), p)
    assert changed.status == "changed" and "own_cookie shop_id" in (changed.warning or "")


def test_a_lock_written_before_id_sources_were_recorded_still_reads_and_learns_them(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    write_spec(p)
    spec = load_spec(p)
    lp = tmp_path / "s.toml.lock"
    old = {"experiment": spec.name, "fingerprint": spec.fingerprint, "salt": spec.salt,
           "arms": [[a.name, a.weight] for a in spec.arms], "recorded_at": "2026-01-01T00:00:00Z",
           "note": "an older lock", "changes": []}
    lp.write_text(json.dumps(old), encoding="utf-8")
    # read-only use (armlock check) leaves it as it is
    assert check_lock(spec, p, write=False).status == "same" and json.loads(lp.read_text()) == old
    # the first use that may write adds today's id sources, keeping everything it had
    assert check_lock(spec, p).status == "same"
    now = json.loads(lp.read_text())
    assert {k: now[k] for k in old} == old and now["id_fingerprint"] == id_fingerprint(spec)
    assert "id_sources_recorded_at" in now
    # from then on an edit of the id sources is caught
    write_spec(p, SOURCE)
    assert check_lock(load_spec(p), p).status == "changed"
    # a changed salt in an old lock is caught as before
    lp.write_text(json.dumps({**old, "salt": "x", "fingerprint": "0" * 16}), encoding="utf-8")
    assert "the salt changed" in (check_lock(load_spec(p), p).warning or "")


def test_a_lock_with_id_sources_of_the_wrong_shape_is_refused(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    write_spec(p)
    check_lock(load_spec(p), p)
    lp = tmp_path / "s.toml.lock"
    lock = json.loads(lp.read_text())
    lp.write_text(json.dumps({**lock, "id_sources": "cookie"}), encoding="utf-8")
    proc = run_cli(tmp_path, "check", "--spec", "s.toml")
    assert proc.returncode == 4 and "wrong shape" in proc.stderr
