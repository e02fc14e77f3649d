"""The plan carried into a new spec: its [readout] values set in the spec's text, the file validated before it is written."""

from __future__ import annotations

import functools
import os
import re
from pathlib import Path
from typing import Any

from armlock.assign import SpecError
from armlock.shared.files import in_place


def carry_plan_into_spec_text(text: str, *, planned_units: int, margin: float | None, alpha: float,
                              power: float) -> str:
    """Set the `[readout]` keys the plan decides (planned units, margin, alpha, power) in a new spec's text.

    Only the first `key = value` line of each key after the `[readout]` header is touched; a spec without
    that section is returned unchanged.
    """
    import re

    head = re.search(r"(?m)^\[readout\][ \t]*$", text)
    if head is None:
        return text
    start = head.end()
    nxt = re.search(r"(?m)^\[(?!readout\])", text[start:])
    end = start + nxt.start() if nxt else len(text)
    section = text[start:end]
    values = {"planned_units": f"{planned_units}", "alpha": f"{alpha:g}", "power": f"{power:g}"}
    if margin is not None:
        values["margin"] = f"{margin:g}"
    def put(m: re.Match[str], v: str) -> str:  # keep the comment in its column when the value fits
        old_width = len(m.group(2)) + len(m.group(3))
        pad = max(old_width - len(v), 1) if m.group(4) else 0
        return f"{m.group(1)}{v}{' ' * pad}{m.group(4) or ''}"

    for key, value in values.items():
        section = re.sub(rf"(?m)^({key}[ \t]*=[ \t]*)([^#\n]*?)([ \t]*)(#.*)?$",
                         functools.partial(lambda v, m: put(m, v), value), section, count=1)
    return text[:start] + section + text[end:]


def write_spec_atomically(name: str, share: float, dest: Path, *, force: bool, carry: dict[str, Any]) -> Any:
    """Render the spec (as `armlock init` does, fresh salt), carry the plan into its `[readout]` table, validate
    it from a temporary file in the destination's folder and only then rename it into place: an invalid spec
    is never left on disk."""
    import tempfile

    from armlock.assign import load_spec
    from armlock.assign.init import render_spec_toml
    from armlock.assign.spec import share_to_basis_points

    if dest.is_dir():
        raise SpecError(f"--spec-out {dest}: is a folder; give the spec's file name, e.g. {dest / (name + '.toml')}")
    if dest.exists() and not force:
        raise SpecError(f"{dest}: already exists; choose another --spec-out or pass --force")
    if in_place(dest):  # a device or pipe: a rename would replace it
        raise SpecError(f"{dest}: not a regular file; give a .toml file name for the spec")
    try:
        h = share_to_basis_points(share)
    except ValueError as exc:
        raise SpecError(f"--write-spec: {exc}") from None
    text = carry_plan_into_spec_text(render_spec_toml(name, [("holdout", h), ("exposed", 10_000 - h)]), **carry)
    folder = dest.parent if str(dest.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise SpecError(f"{dest}: cannot write: {exc.strerror}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        spec = load_spec(tmp)  # the spec as written must validate, or nothing is left behind
        os.replace(tmp, dest)
    except OSError as exc:
        raise SpecError(f"{dest}: cannot write: {exc.strerror}") from None
    except SpecError as exc:
        raise SpecError(f"--write-spec: no spec written, because it would not validate: {exc}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return spec
