"""The fingerprint lock beside a spec: records the split at first use, refuses an unconfirmed change."""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from .errors import SpecError
from .spec import Spec

LOCK_SUFFIX = ".lock"
MAX_LOCK_BYTES = 1 << 20  # a lock file is a few hundred bytes; anything huge is not one


def lock_path(spec_path: str | Path) -> Path:
    """`experiment.toml` -> `experiment.toml.lock` (commit it beside the spec)."""
    p = Path(spec_path)
    return p.with_name(p.name + LOCK_SUFFIX)


@dataclass(frozen=True)
class LockCheck:
    """What the lock file says about the spec: first use, same split, or a changed split."""

    path: Path
    status: str  # "recorded" (first use, lock written), "same", "changed", "unwritable"
    recorded: dict | None = None
    warning: str | None = None
    changes: list[dict[str, Any]] = field(default_factory=list)  # confirmed changes, oldest first


def id_sources(spec: Spec) -> list[list[str]]:
    """Where the snippet takes a browser's id, in order: the configured sources, then armlock's cookie.

    Changing them changes which id is hashed for people already in the test, as a changed salt
    does. Whether the server or the snippet sets armlock's cookie (`id_from`) is not part of it:
    the server keeps every valid id the snippet set, so moving to server-set ids moves nobody.
    """
    return [[s.kind, s.name, s.pattern] for s in spec.snippet.id_sources] + [["own_cookie", spec.snippet.cookie_name, ""]]


def id_fingerprint(spec: Spec) -> str:
    """16 hex digits of SHA-256 over the canonical JSON of `id_sources(spec)`."""
    canon = json.dumps(id_sources(spec), separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(canon.encode("utf-8")).hexdigest()[:16]


def _fmt_sources(sources: list) -> str:
    def one(s: list) -> str:
        kind, name, pattern = (list(s) + ["", "", ""])[:3]
        return f"{kind} {name}" + (f" ~ {pattern}" if pattern else "")
    return ", ".join(one(s) for s in sources) or "?"


def _ids_changed(old: dict, spec: Spec) -> bool:
    """Whether the lock recorded other id sources (a lock written before they were recorded: no)."""
    return "id_fingerprint" in old and old["id_fingerprint"] != id_fingerprint(spec)


def _describe_change(old: dict, spec: Spec) -> str:
    parts = []
    if old.get("salt") != spec.salt:
        parts.append("the salt changed")
    old_arms = [tuple(a) for a in old.get("arms", [])]
    new_arms = [(a.name, a.weight) for a in spec.arms]
    if old_arms != new_arms:
        fmt = lambda arms: ", ".join(f"{n} {w}" for n, w in arms) or "?"  # noqa: E731
        parts.append(f"the arms changed from [{fmt(old_arms)}] to [{fmt(new_arms)}]")
    if _ids_changed(old, spec):
        parts.append(f"the id sources changed from [{_fmt_sources(old.get('id_sources', []))}] "
                     f"to [{_fmt_sources(id_sources(spec))}]")
    return " and ".join(parts) or "the assignment fields changed"


def _valid_shape(data: Any) -> bool:
    """A lock is an object with a text fingerprint, a text salt and arms as [name, weight] pairs."""
    if not isinstance(data, dict) or not isinstance(data.get("fingerprint"), str):
        return False
    if not isinstance(data.get("salt", ""), str):
        return False
    arms = data.get("arms", [])
    if not isinstance(arms, list) or not all(
            isinstance(a, list) and len(a) == 2 and isinstance(a[0], str) and isinstance(a[1], int) for a in arms):
        return False
    if not isinstance(data.get("id_fingerprint", ""), str):
        return False
    sources = data.get("id_sources", [])
    if not isinstance(sources, list) or not all(
            isinstance(s, list) and all(isinstance(x, str) for x in s) for s in sources):
        return False
    changes = data.get("changes", [])
    return isinstance(changes, list) and all(isinstance(c, dict) for c in changes)


def read_lock(spec_path: str | Path) -> dict | None:
    """The lock recorded beside a spec (None when there is none); SpecError when it is not a lock."""
    lp = lock_path(spec_path)
    advice = "restore it from version control, or delete it to record the current split"
    try:
        raw = lp.read_bytes()
    except FileNotFoundError:
        return None
    except IsADirectoryError:
        raise SpecError(f"{lp}: the lock file is a directory; {advice}") from None
    except OSError as exc:
        raise SpecError(f"{lp}: cannot read the lock file ({exc.strerror}); {advice}") from None
    try:
        if len(raw) > MAX_LOCK_BYTES:
            raise ValueError("too large")
        data = json.loads(raw.decode("utf-8"))
    except (ValueError, RecursionError):
        raise SpecError(f"{lp}: the lock file is unreadable or corrupt; {advice}") from None
    if not _valid_shape(data):
        raise SpecError(f"{lp}: the lock file does not hold a recorded fingerprint (wrong shape); {advice}")
    return data


def _record(spec: Spec, changes: list[dict[str, Any]]) -> dict[str, Any]:
    return {
        "experiment": spec.name,
        "fingerprint": spec.fingerprint,
        "salt": spec.salt,
        "arms": [[a.name, a.weight] for a in spec.arms],
        "id_fingerprint": id_fingerprint(spec),
        "id_sources": id_sources(spec),
        "recorded_at": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "note": "Written by armlock at first use of the spec. Commit it with the spec; "
        "if the fingerprint of the spec ever differs, armlock refuses to go on until the change is confirmed.",
        "changes": changes,
    }


def _write(lp: Path, record: dict[str, Any]) -> str | None:
    """Write the lock atomically; returns a warning when it cannot be written."""
    tmp = lp.with_name(lp.name + f".tmp{os.getpid()}")
    try:
        tmp.write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        os.replace(tmp, lp)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        return f"{lp}: could not record the spec fingerprint ({exc.strerror}); changes to the split will go unnoticed"
    return None


def check_lock(spec: Spec, spec_path: str | Path, *, write: bool = True) -> LockCheck:
    """Compare the spec's fingerprint with the one recorded at first use; record it if absent.

    Raises SpecError when the lock file exists but is not a lock (corrupt or the wrong shape).
    """
    lp = lock_path(spec_path)
    old = read_lock(spec_path)
    if old is None:
        if not write:
            return LockCheck(lp, "recorded", None)
        record = _record(spec, [])
        problem = _write(lp, record)
        if problem:
            return LockCheck(lp, "unwritable", None, problem)
        return LockCheck(lp, "recorded", record)
    changes = list(old.get("changes", []))
    if old.get("fingerprint") == spec.fingerprint and not _ids_changed(old, spec):
        if "id_fingerprint" not in old and write:
            old = _add_id_sources(lp, old, spec)
        return LockCheck(lp, "same", old, changes=changes)
    started = spec.start <= datetime.now(timezone.utc)
    what = ("Changing the salt or the arm weights re-hashes every visitor: "
            if old.get("fingerprint") != spec.fingerprint else
            "Changing the id sources (or the id cookie's name) changes which id is hashed for people "
            "already in the test, so a returning visitor can land in another arm: ")
    warning = (
        f"THE SPLIT HAS CHANGED. {_describe_change(old, spec)} since the spec was first used "
        f"({old.get('recorded_at', '?')}, fingerprint {old.get('fingerprint')}; now {spec.fingerprint}"
        + (f"; id sources {old.get('id_fingerprint')}, now {id_fingerprint(spec)}" if _ids_changed(old, spec) else "")
        + ").\n" + what
        + ("the test has started, so people already counted in one arm move to another and "
           "the arms are no longer comparable. "
           if started else "the test has not started yet, so this is harmless if deliberate. ")
        + "Undo the edit, or, if you mean it, rerun with --accept-changed-split to record the new split"
        + (" (audits of this test will then fail, naming the change)." if started else ".")
    )
    return LockCheck(lp, "changed", old, warning, changes=changes)


def _add_id_sources(lp: Path, old: dict, spec: Spec) -> dict:
    """A lock written before id sources were recorded gets them now, as the spec has them today.

    Such a lock cannot tell whether the id sources changed before this moment; from now on a
    change is caught. A lock that cannot be rewritten is read as before (split only).
    """
    record = {**old, "id_fingerprint": id_fingerprint(spec), "id_sources": id_sources(spec),
              "id_sources_recorded_at": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")}
    return old if _write(lp, record) else record


def accept_change(spec: Spec, check: LockCheck) -> LockCheck:
    """Record a confirmed change of split: the new fingerprint, and the change in the lock's history."""
    old = check.recorded or {}
    now = datetime.now(timezone.utc)
    change = {"from": old.get("fingerprint"), "to": spec.fingerprint, "what": _describe_change(old, spec),
              "at": now.strftime("%Y-%m-%dT%H:%M:%SZ"), "after_start": spec.start <= now}
    record = _record(spec, [*check.changes, change])
    problem = _write(check.path, record)
    return LockCheck(check.path, "unwritable" if problem else "same", record, problem, changes=record["changes"])


def changes_after_start(check: LockCheck) -> list[str]:
    """Sentences for each confirmed change of split made after the test had started."""
    return [f"the split was changed on {c.get('at', '?')}, after the test started ({c.get('what', 'salt or weights')}; "
            f"fingerprint {c.get('from')} -> {c.get('to')})"
            for c in check.changes if c.get("after_start")]
