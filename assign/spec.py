"""The experiment spec: a pydantic model of the TOML file, its loader and its fingerprint."""

from __future__ import annotations

import hashlib
import json
import tomllib
from datetime import datetime, timezone
from decimal import Decimal, InvalidOperation
from functools import cached_property
from pathlib import Path
from typing import Any, Final, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from .contract import BUCKETS, SEPARATOR, cumulative
from .errors import SpecError
from .spec_audit import AuditSettings
from .spec_readout import ReadoutSettings
from .spec_snippet import SnippetSettings

SPEC_FORMAT: Final = 1
CONTRACT = "armlock-assign-1"  # name of the frozen contract (shared/CONTRACT.md); part of the fingerprint
NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_]{0,63}$"
EXPERIMENT_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,99}$"


def share_to_basis_points(share: float | int | str) -> int:
    """Convert a share such as 0.1 to basis points exactly, or raise ValueError.

    The decimal text of the number is used, so 0.1 is 1000 and not 999.99...; a share that is
    not a whole number of basis points (0.12345) is rejected rather than rounded.
    """
    try:
        d = Decimal(str(share))
    except InvalidOperation:
        raise ValueError(f"share {share!r} is not a number") from None
    bp = d * BUCKETS
    if bp != bp.to_integral_value():
        raise ValueError(
            f"share {share} is not a whole number of basis points (0.0001); "
            f"use e.g. {float(bp.quantize(Decimal(1))) / BUCKETS}"
        )
    return int(bp)


class Arm(BaseModel):
    """One arm: a name, its weight in basis points and its role in the test."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(pattern=NAME_PATTERN)
    weight: int = Field(ge=1, le=BUCKETS, strict=True)
    role: Literal["holdout", "exposed"]

    @model_validator(mode="before")
    @classmethod
    def _weight_or_share(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        data = dict(data)
        if "share" in data:
            if "weight" in data:
                raise ValueError("give either weight (basis points) or share (fraction), not both")
            share = data.pop("share")
            if isinstance(share, bool) or not isinstance(share, (int, float)):
                raise ValueError(f"share must be a number such as 0.5, got {share!r}")
            if not 0 < share <= 1:
                raise ValueError(f"share must be in (0, 1], got {share}")
            data["weight"] = share_to_basis_points(share)
        elif isinstance(data.get("weight"), float):
            raise ValueError(
                f"weight is in whole basis points (5000 = 50%), got {data['weight']}; "
                "write share = 0.5 for a fraction"
            )
        if "role" not in data and isinstance(data.get("name"), str):
            data["role"] = "holdout" if data["name"].lower().startswith("holdout") else "exposed"
        return data


class Spec(BaseModel):
    """An experiment spec. Only `salt` and `arms` (names, order, weights) decide assignment."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    format: Literal[1] = SPEC_FORMAT
    name: str = Field(pattern=EXPERIMENT_PATTERN)
    description: str = ""
    salt: str = Field(min_length=1, max_length=256)
    start: datetime
    end: datetime | None = None
    arms: tuple[Arm, ...] = Field(min_length=2, max_length=26)
    snippet: SnippetSettings = SnippetSettings()
    audit: AuditSettings = AuditSettings()
    readout: ReadoutSettings = ReadoutSettings()

    @field_validator("salt")
    @classmethod
    def _salt_ok(cls, v: str) -> str:
        if SEPARATOR in v:
            raise ValueError("the salt must not contain ':' (it separates salt and id in the key)")
        if any(ord(c) < 32 or ord(c) == 127 for c in v):
            raise ValueError("the salt must not contain control characters")
        return v

    @field_validator("start", "end")
    @classmethod
    def _aware(cls, v: datetime | None) -> datetime | None:
        if v is None:
            return None
        if v.tzinfo is None:
            raise ValueError(
                "the time needs a UTC offset, e.g. 2026-12-01T00:00:00Z (a time without a zone "
                "is ambiguous)"
            )
        if not 1970 <= v.year <= 2200:
            raise ValueError("the time must fall between the years 1970 and 2200")
        try:
            return v.astimezone(timezone.utc)
        except OverflowError:
            raise ValueError("the time must fall between the years 1970 and 2200") from None

    @field_validator("arms")
    @classmethod
    def _arms_ok(cls, arms: tuple[Arm, ...]) -> tuple[Arm, ...]:
        names = [a.name for a in arms]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ValueError(f"arm names must be unique; repeated: {', '.join(dup)}")
        total = sum(a.weight for a in arms)
        if total != BUCKETS:
            shown = " + ".join(str(a.weight) for a in arms)
            raise ValueError(
                f"arm weights must sum to {BUCKETS} basis points (100%); got {shown} = {total}"
            )
        roles = {a.role for a in arms}
        if roles != {"holdout", "exposed"}:
            raise ValueError(
                "a holdout test needs at least one arm with role = \"holdout\" and one with "
                f"role = \"exposed\"; got roles {sorted(roles)}"
            )
        return arms

    @model_validator(mode="after")
    def _dates_ok(self) -> Spec:
        if self.end is not None and self.end <= self.start:
            raise ValueError("end must be after start")
        return self

    # -- derived, assignment-relevant views ------------------------------------------------
    # Derived once per (frozen) spec: arm_for() reads them on every call.
    @cached_property
    def arm_names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.arms)

    @cached_property
    def weights(self) -> tuple[int, ...]:
        return tuple(a.weight for a in self.arms)

    @cached_property
    def cumulative(self) -> tuple[int, ...]:
        return tuple(cumulative(self.weights))

    @cached_property
    def holdout_arms(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.arms if a.role == "holdout")

    @cached_property
    def exposed_arms(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.arms if a.role == "exposed")

    @cached_property
    def fingerprint(self) -> str:
        return fingerprint(self.salt, [(a.name, a.weight) for a in self.arms])


def fingerprint(salt: str, arms: list[tuple[str, int]]) -> str:
    """Short stable hash (16 hex) of the canonical assignment-relevant fields.

    Canonical form: compact JSON of {"contract", "salt", "arms": [[name, weight], ...]} in arm
    order, UTF-8, SHA-256. Cosmetic fields (description, snippet, audit, dates) do not enter.
    """
    canon = json.dumps(
        {"contract": CONTRACT, "salt": salt, "arms": [[n, w] for n, w in arms]},
        separators=(",", ":"),
        ensure_ascii=False,
        sort_keys=True,
    )
    return hashlib.sha256(canon.encode("utf-8")).hexdigest()[:16]


# -- loading ------------------------------------------------------------------------------
def _loc_path(loc: tuple[int | str, ...]) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "(top level)"


def _model_at(loc: tuple[int | str, ...]) -> type[BaseModel] | None:
    """The pydantic model that owns the field at `loc` (to list its valid keys)."""
    model: Any = Spec
    for part in loc[:-1]:
        if isinstance(part, int):
            continue
        field = model.model_fields.get(part) if isinstance(model, type) and issubclass(model, BaseModel) else None
        if field is None:
            return None
        ann = field.annotation
        args = getattr(ann, "__args__", ())
        cands = [ann, *args]
        nxt = next((c for c in cands if isinstance(c, type) and issubclass(c, BaseModel)), None)
        if nxt is None:
            return None
        model = nxt
    return model if isinstance(model, type) else None


def _describe(err: dict[str, Any]) -> str:
    loc = tuple(err.get("loc", ()))
    kind = err.get("type", "")
    if kind == "extra_forbidden":
        model = _model_at(loc)
        valid = ", ".join(model.model_fields) if model else ""
        key = loc[-1] if loc else "?"
        return f"unknown key '{key}'" + (f"; valid keys here: {valid}" if valid else "")
    if kind == "missing":
        return "required key is missing"
    msg = str(err.get("msg", "invalid value"))
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    if kind == "string_pattern_mismatch":
        if loc and loc[-1] == "name" and len(loc) > 1:
            msg = "arm names are identifiers: a letter, then letters, digits or _ (at most 64)"
        elif loc == ("name",):
            msg = "the experiment name is letters, digits, '.', '_' or '-' (at most 100)"
    if kind == "literal_error" and loc and loc[-1] == "role":
        msg = 'role must be "holdout" (the vendor may not reach it) or "exposed"'
    if kind == "string_too_short" and loc == ("salt",):
        msg = "the salt must not be empty (armlock init writes a random one)"
    if kind == "too_short" and loc == ("arms",):
        msg = "a test needs at least two arms (a holdout and an exposed arm)"
    given = err.get("input")
    if isinstance(given, datetime):
        given = given.isoformat()
    if kind not in ("missing",) and not isinstance(given, (dict, list, tuple)) and given is not None:
        msg += f" (got {given!r})"
    return msg


def spec_from_dict(data: dict[str, Any], source: str = "<spec>") -> Spec:
    """Validate a parsed spec; raise SpecError listing every problem as `file: path: what`."""
    try:
        return Spec.model_validate(data)
    except ValidationError as exc:
        errors = exc.errors()
        item_failed = any(len(e["loc"]) > 1 and e["loc"][0] == "arms" for e in errors)
        lines = [
            f"{source}: {_loc_path(tuple(e['loc']))}: {_describe(dict(e))}"
            for e in errors
            # a failed arm also makes the tuple "too short": say only the real problem
            if not (item_failed and e["type"] == "too_short" and tuple(e["loc"]) == ("arms",))
        ]
        raise SpecError("invalid experiment spec\n  " + "\n  ".join(lines)) from None


def load_spec(path: str | Path, notes: list[str] | None = None) -> Spec:
    """Read and validate a spec TOML file (a leading UTF-8 byte-order mark is removed, noted in `notes`)."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise SpecError(f"{p}: spec file not found (create one with `armlock init NAME`)") from None
    except IsADirectoryError:
        raise SpecError(f"{p}: is a directory, not a spec file") from None
    except OSError as exc:
        raise SpecError(f"{p}: cannot read spec file: {exc.strerror}") from None
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
        if notes is not None:
            notes.append(f"{p}: a leading UTF-8 byte-order mark was removed (it is not part of the spec)")
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise SpecError(f"{p}: spec file is not UTF-8 text (byte {exc.start})") from None
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{p}: not valid TOML: {exc}") from None
    except RecursionError:
        raise SpecError(f"{p}: not a spec: its tables or arrays are nested too deeply to read") from None
    return spec_from_dict(data, str(p))
