"""A new spec file on disk (`armlock init`): the name and split checked, a fresh salt, written atomically."""

from __future__ import annotations

from pathlib import Path

from armlock.assign import Spec, SpecError, load_spec
from armlock.assign.init import parse_arms, render_spec_toml
from armlock.assign.spec import EXPERIMENT_PATTERN

from .files import write_atomic


def write_new_spec(name: str, *, holdout_share: float = 0.5, arms: str | None = None, out: Path | None = None,
                   force: bool = False) -> tuple[Path, Spec]:
    """Validate the name and split, write NAME.toml (or `out`) with a fresh salt (`armlock init`)."""
    import re

    if not re.match(EXPERIMENT_PATTERN, name):
        raise SpecError(f"experiment name {name!r}: use letters, digits, '.', '_' or '-' (at most 100), starting with a letter or digit")
    try:
        if arms:
            arm_list = parse_arms(arms)
            if not any(n.lower().startswith("holdout") for n, _ in arm_list):
                raise ValueError(f"--arms {arms}: no arm name starts with 'holdout', so no arm would be held "
                                 "out; name the held-out arm holdout (or holdout_...), e.g. "
                                 "holdout=10%,exposed=90%")
        else:
            if not 0 < holdout_share < 1:
                raise ValueError(f"--holdout-share must be between 0 and 1, got {holdout_share}")
            from armlock.assign.spec import share_to_basis_points

            h = share_to_basis_points(holdout_share)
            arm_list = [("holdout", h), ("exposed", 10_000 - h)]
    except ValueError as exc:
        raise SpecError(str(exc)) from None
    target = out or Path(f"{name}.toml")
    if target.is_dir():
        raise SpecError(f"--out {target}: is a folder; give the spec's file name, e.g. --out {target / (name + '.toml')}")
    if target.exists() and not force:
        raise SpecError(f"{target}: already exists; choose another --out or pass --force")
    from armlock.assign.init import new_salt
    from armlock.assign.portfolio import refuse_shared_salt

    salt = new_salt()
    refuse_shared_salt(target, salt)  # a fresh salt never clashes; this guards the rule in one place
    text = render_spec_toml(name, arm_list, salt=salt)
    write_atomic(target, text, what="the spec")
    return target, load_spec(target)
