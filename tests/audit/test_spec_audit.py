"""The `[audit]` tables: the text `armlock init` writes equals the defaults, names every field, and validates."""

from __future__ import annotations

import tomllib

import pytest
from pydantic import BaseModel, ValidationError

from armlock.assign import SpecError, spec_from_dict
from armlock.assign.spec_audit import AuditSettings, audit_section_toml


def _fields(model: type[BaseModel], prefix: str = "") -> list[str]:
    out = []
    for name, f in model.model_fields.items():
        ann = f.annotation
        if isinstance(ann, type) and issubclass(ann, BaseModel):
            out += _fields(ann, f"{prefix}{name}.")
        else:
            out.append(prefix + name)
    return out


def test_written_section_equals_the_defaults() -> None:
    data = tomllib.loads(audit_section_toml())
    assert AuditSettings.model_validate(data["audit"]) == AuditSettings()


def test_every_field_is_written_with_a_comment() -> None:
    text = audit_section_toml()
    data = tomllib.loads(text)["audit"]
    for path in _fields(AuditSettings):
        node = data
        for part in path.split("."):
            assert part in node, f"{path} is not written by audit_section_toml()"
            node = node[part]
        *table, key = path.split(".")
        header = "[audit" + "".join(f".{t}" for t in table) + "]"
        section = text.split(header + "\n", 1)[1].split("\n[", 1)[0]
        line = next(ln for ln in section.splitlines() if ln.startswith(f"{key} ="))
        assert "#" in line, f"{path} has no comment"


@pytest.mark.parametrize("audit,message", [
    ({"thresholds": {"leak_warn": 0.1, "leak_fail": 0.01}}, "leak_warn (0.1) must not exceed leak_fail (0.01)"),
    ({"exposures": {"impression_values": ["view"], "click_values": ["view"]}}, "both impression and click: view"),
    ({"segments": ["unit_id"]}, "segments must not list the id, time or arm column: unit_id"),
    ({"covariates": ["device"]}, "either numeric or categorical, not both: device"),
    ({"thresholds": {"srm_p": 0}}, "srm_p"),
])
def test_bad_audit_settings_are_refused(audit: dict, message: str) -> None:
    with pytest.raises(SpecError) as exc:
        spec_from_dict({"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z", "audit": audit,
                        "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}]})
    assert message in str(exc.value)


def test_unknown_audit_key_lists_valid_keys() -> None:
    with pytest.raises(ValidationError):
        AuditSettings.model_validate({"visits": {"user": "x"}})
