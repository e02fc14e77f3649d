"""A folder of specs is the shop's portfolio: its specs, and the rule that no two share a salt.

Two tests with one salt put every visitor in the same bucket twice, so their arms nest exactly
(a 10% holdout inside a 10% holdout is the same 10% of people): each test's holdout is confounded
by the other's. Salts must be unique within the folder; `init` and `check` refuse a clash.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from .errors import SpecError

if TYPE_CHECKING:
    from .spec import Spec

SPEC_SUFFIX = ".toml"


@dataclass(frozen=True)
class Sibling:
    """Another spec file of the folder, read just enough to compare salts (not validated)."""

    path: Path
    name: str
    salt: str


def looks_like_spec(data: dict[str, object]) -> bool:
    """A TOML document is a spec when it has a text `salt` and a list of `arms` (pyproject.toml is not)."""
    return isinstance(data.get("salt"), str) and isinstance(data.get("arms"), list)


def folder_specs(folder: Path, *, exclude: Path | None = None,
                 notes: list[str] | None = None) -> list[Sibling]:
    """The spec files of a folder (`*.toml` that look like specs), by file name.

    A `.toml` file that cannot be read as TOML is left out with a note (in `notes`), never silently.
    """
    out: list[Sibling] = []
    skip = exclude.resolve() if exclude is not None else None
    for p in sorted(folder.glob(f"*{SPEC_SUFFIX}")):
        if not p.is_file() or (skip is not None and p.resolve() == skip):
            continue
        try:
            raw = p.read_bytes().removeprefix(b"\xef\xbb\xbf")
            data = tomllib.loads(raw.decode("utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError) as exc:
            if notes is not None:
                notes.append(f"{p}: not read as a spec of the folder ({type(exc).__name__}); "
                             "its salt was not compared")
            continue
        if looks_like_spec(data):
            name = data.get("name")
            out.append(Sibling(p, name if isinstance(name, str) else p.stem, str(data["salt"])))
    return out


def refuse_shared_salt(path: Path, salt: str, notes: list[str] | None = None) -> None:
    """Raise SpecError (exit 4) naming both files when another spec of `path`'s folder has `salt`."""
    for sib in folder_specs(path.parent if str(path.parent) else Path("."), exclude=path, notes=notes):
        if sib.salt == salt:
            raise SpecError(
                f"{path}: its salt is already used by {sib.path} (experiment {sib.name!r}) in the same "
                "folder: two tests with one salt split visitors identically, so their arms nest and each "
                "confounds the other. Give one of them a fresh salt before its test starts (armlock init "
                "draws one), or move a copy that is not a running test out of the folder")


def alongside_specs(spec_path: Path, given: list[Path], notes: list[str]) -> list[tuple[str, Spec]]:
    """The specs named by --alongside: each file, and every other spec of each folder (validated;
    the audited spec itself is left out, a copy of it is not). What a folder's reading noticed goes
    to `notes`."""
    from .spec import load_spec

    out: dict[Path, tuple[str, Spec]] = {}
    me = spec_path.resolve()
    for item in given:
        files = ([s.path for s in folder_specs(item, exclude=spec_path, notes=notes)] if item.is_dir()
                 else [item])
        for f in files:
            if f.resolve() != me:
                out.setdefault(f.resolve(), (str(f), load_spec(f)))
    return list(out.values())
