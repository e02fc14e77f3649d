"""The report's JSON Schema in shared/schemas/ is the model's own, and real reports validate against it."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from jsonschema import Draft202012Validator

from armlock.assign import spec_from_dict
from armlock.audit.model import SCHEMA, json_schema
from armlock.audit.render import render
from armlock.audit.run import run_audit
from armlock.audit.synth import generate, write_logs

ROOT = Path(__file__).resolve().parents[2]
CHECKED_IN = ROOT / "shared" / "schemas" / f"{SCHEMA.replace('/', '-')}.schema.json"
SPEC = spec_from_dict({"name": "schema-test", "salt": "invented-schema-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}]})


def test_checked_in_schema_is_the_models_schema() -> None:
    """After a model change, regenerate it:
    python -c "import json; from armlock.audit.model import json_schema; print(json.dumps(json_schema(), indent=2, ensure_ascii=False))" \\
        > shared/schemas/armlock.audit-1.schema.json
    (a change that removes or renames a field also bumps SCHEMA, and gets a new file)."""
    assert json.loads(CHECKED_IN.read_text(encoding="utf-8")) == json_schema()
    Draft202012Validator.check_schema(json_schema())


@pytest.fixture(scope="module")
def report_json(tmp_path_factory: pytest.TempPathFactory) -> dict:
    logs = generate(SPEC, units=6_000, days=21, seed=11, faults=("leakage", "cookie_churn"))
    paths = write_logs(logs, tmp_path_factory.mktemp("schema"), "parquet")
    rep = run_audit(SPEC, visits=paths["visits"], exposures=paths["exposures"], identities=paths["identities"])
    return json.loads(render(rep, "json"))


def test_a_real_report_validates(report_json: dict) -> None:
    validator = Draft202012Validator(json.loads(CHECKED_IN.read_text(encoding="utf-8")))
    assert list(validator.iter_errors(report_json)) == []
    assert report_json["schema"] == SCHEMA


def test_a_damaged_report_does_not_validate(report_json: dict) -> None:
    validator = Draft202012Validator(json.loads(CHECKED_IN.read_text(encoding="utf-8")))
    broken = json.loads(json.dumps(report_json))
    del broken["verdict"]
    broken["checks"][0]["status"] = "fine"
    broken["checks"][1]["figures"] = {"x": {"label": "x", "value": 1, "unit": "furlongs"}}
    messages = sorted(e.message for e in validator.iter_errors(broken))
    assert any("'verdict' is a required property" in m for m in messages)
    assert any("'fine' is not one of" in m for m in messages) and any("'furlongs'" in m for m in messages)
