"""Writing a new spec: a fresh random salt and a commented TOML file a person can edit."""

from __future__ import annotations

import json
import secrets
from datetime import datetime, timezone

from .spec import share_to_basis_points, spec_from_dict
from .spec_audit import audit_section_toml
from .spec_readout import readout_section_toml
from .spec_snippet import snippet_section_toml

SALT_BYTES = 12  # 96 bits of randomness from the OS (secrets), written as hex


def new_salt() -> str:
    """A fresh random salt: 96 bits from `secrets`, hex-encoded (24 characters)."""
    return secrets.token_hex(SALT_BYTES)


def parse_arms(text: str) -> list[tuple[str, int]]:
    """`holdout=0.2,exposed=0.8` (shares), `holdout=20%,exposed=80%` or `holdout=2000bp,...`."""
    arms = []
    for part in filter(None, (p.strip() for p in text.split(","))):
        name, eq, val = part.partition("=")
        if not eq or not name.strip() or not val.strip():
            raise ValueError(f"--arms: '{part}' is not NAME=SHARE (e.g. holdout=0.1,exposed=0.9)")
        val = val.strip()
        if val.endswith("bp"):
            if not val[:-2].isdigit():
                raise ValueError(f"--arms: '{val}' is not a whole number of basis points")
            bp = int(val[:-2])
        elif val.endswith("%"):
            bp = share_to_basis_points(str(float(val[:-1]) / 100)) if val[:-1] else -1
        else:
            bp = share_to_basis_points(val)
        arms.append((name.strip(), bp))
    return arms


def render_spec_toml(
    name: str,
    arms: list[tuple[str, int]],
    *,
    salt: str | None = None,
    start: datetime | None = None,
    description: str = "",
) -> str:
    """The text of a new spec file; validated before it is returned."""
    salt = salt or new_salt()
    start = (start or datetime.now(timezone.utc)).astimezone(timezone.utc).replace(microsecond=0)
    q = lambda s: json.dumps(s, ensure_ascii=False)  # TOML basic strings accept JSON escapes  # noqa: E731
    arm_tables = "".join(
        f"\n[[arms]]\nname = {q(n)}\nweight = {w}  # basis points: {w / 100:g}% of visitors\n"
        + ('role = "holdout"  # the vendor must never reach this arm\n' if n.lower().startswith("holdout")
           else 'role = "exposed"  # the vendor may tag this arm\n')
        for n, w in arms
    )
    text = f'''# armlock experiment spec (format 1), written by `armlock init`.
# The split is decided only by `salt` and the ordered `arms` (names and weights); armlock
# prints their fingerprint with `armlock check`. NEVER edit salt or weights after the test
# starts: it reshuffles every visitor (armlock warns when it sees that happen).
format = 1
name = {q(name)}
description = {q(description)}

# Random, secret-ish, unique per test: a new test gets a new salt so its split is independent.
salt = {q(salt)}

# When the test starts (UTC). Units first seen before this are reported by the audit.
start = {start.strftime("%Y-%m-%dT%H:%M:%SZ")}
# end = 2027-03-01T00:00:00Z   # optional
{arm_tables}{snippet_section_toml()}{audit_section_toml()}{readout_section_toml()}'''
    import tomllib

    spec_from_dict(tomllib.loads(text), f"<new spec {name}>")  # never write an invalid spec
    return text
