"""The `[readout]` tables: the text `armlock init` writes equals the defaults, names every field, and validates."""

from __future__ import annotations

import tomllib

import pytest
from pydantic import BaseModel

from armlock.assign import SpecError, spec_from_dict
from armlock.assign.init import render_spec_toml
from armlock.assign.spec_readout import ReadoutSettings, readout_section_toml


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
    data = tomllib.loads(readout_section_toml())
    assert ReadoutSettings.model_validate(data["readout"]) == ReadoutSettings()


def test_init_writes_the_readout_section() -> None:
    text = render_spec_toml("t", [("holdout", 1000), ("exposed", 9000)])
    assert "[readout]" in text and "[readout.orders]" in text and "[readout.spend]" in text


def test_every_field_is_written_with_a_comment() -> None:
    text = readout_section_toml()
    data = tomllib.loads(text)["readout"]
    for path in _fields(ReadoutSettings):
        node = data
        for part in path.split("."):
            assert part in node, f"{path} is not written by readout_section_toml()"
            node = node[part]
        *table, key = path.split(".")
        header = "[readout" + "".join(f".{t}" for t in table) + "]"
        section = text.split(header + "\n", 1)[1].split("\n[", 1)[0]
        line = next(ln for ln in section.splitlines() if ln.startswith(f"{key} ="))
        assert "#" in line, f"{path} has no comment"


@pytest.mark.parametrize("readout,message", [
    ({"orders": {"unit_id": "", "customer": ""}}, "exactly one key for orders"),
    ({"orders": {"unit_id": "u", "customer": "c"}}, "exactly one key for orders"),
    ({"window": 0}, "window is \"to_as_of\" or a number of days"),
    ({"window": "forever"}, "window"),
    ({"revenue_cap": 0.2}, "revenue_cap is a high quantile"),
    ({"currency": "usd"}, "currency"),
    ({"margin": 0}, "margin"),
    ({"covariates": ["pre_revenue", "pre_revenue"]}, "covariates are listed twice: pre_revenue"),
])
def test_bad_readout_settings_are_refused(readout: dict, message: str) -> None:
    with pytest.raises(SpecError) as exc:
        spec_from_dict({"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z", "readout": readout,
                        "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}]})
    assert message in str(exc.value)


def test_customer_keyed_orders_and_day_window_are_accepted() -> None:
    spec = spec_from_dict({"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z",
                           "readout": {"window": 28, "orders": {"unit_id": "", "customer": "cust"}},
                           "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}]})
    assert spec.readout.window == 28 and spec.readout.orders.customer == "cust"


def test_readout_settings_do_not_change_the_fingerprint() -> None:
    base = {"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z",
            "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}]}
    assert spec_from_dict(base).fingerprint == spec_from_dict({**base, "readout": {"margin": 0.5}}).fingerprint
