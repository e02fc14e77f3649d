"""The fingerprint lock beside a spec: records the split at first use, warns when it changes."""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from .spec import Spec

LOCK_SUFFIX = ".lock"


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


def _describe_change(old: dict, spec: Spec) -> str:
    parts = []
    if old.get("salt") != spec.salt:
        parts.append("the salt changed")
    old_arms = [tuple(a) for a in old.get("arms", [])]
    new_arms = [(a.name, a.weight) for a in spec.arms]
    if old_arms != new_arms:
        fmt = lambda arms: ", ".join(f"{n} {w}" for n, w in arms) or "?"  # noqa: E731
        parts.append(f"the arms changed from [{fmt(old_arms)}] to [{fmt(new_arms)}]")
    return " and ".join(parts) or "the assignment fields changed"


def check_lock(spec: Spec, spec_path: str | Path, *, write: bool = True) -> LockCheck:
    """Compare the spec's fingerprint with the one recorded at first use; record it if absent."""
    lp = lock_path(spec_path)
    try:
        old = json.loads(lp.read_text(encoding="utf-8"))
    except FileNotFoundError:
        old = None
    except (OSError, ValueError):
        return LockCheck(lp, "changed", None, f"{lp}: the lock file is unreadable or corrupt; "
                         "restore it from version control, or delete it to record the current split")
    if old is None:
        if not write:
            return LockCheck(lp, "recorded", None)
        record = {
            "experiment": spec.name,
            "fingerprint": spec.fingerprint,
            "salt": spec.salt,
            "arms": [[a.name, a.weight] for a in spec.arms],
            "recorded_at": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "note": "Written by armlock at first use of the spec. Commit it with the spec; "
            "if the fingerprint of the spec ever differs, armlock warns that visitors were reshuffled.",
        }
        try:
            tmp = lp.with_name(lp.name + f".tmp{os.getpid()}")
            tmp.write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
            os.replace(tmp, lp)
        except OSError as exc:
            return LockCheck(lp, "unwritable", None, f"{lp}: could not record the spec fingerprint "
                             f"({exc.strerror}); changes to the split will go unnoticed")
        return LockCheck(lp, "recorded", record)
    if old.get("fingerprint") == spec.fingerprint:
        return LockCheck(lp, "same", old)
    started = spec.start <= datetime.now(timezone.utc)
    warning = (
        f"THE SPLIT HAS CHANGED. {_describe_change(old, spec)} since the spec was first used "
        f"({old.get('recorded_at', '?')}, fingerprint {old.get('fingerprint')}; now {spec.fingerprint}).\n"
        "Changing the salt or the arm weights re-hashes every visitor: "
        + ("the test has started, so people already counted in one arm move to another and "
           "the arms are no longer comparable. "
           if started else "the test has not started yet, so this is harmless if deliberate. ")
        + f"Undo the edit, or, if you mean it, delete {lp.name} to record the new split."
    )
    return LockCheck(lp, "changed", old, warning)
