"""The audit's result: checks with status, figures, tables and chart series; the JSON schema's source.

This is the seam between the checks (which fill it) and the reports and history (which only read
it). JSON output is `AuditReport.model_dump(mode="json")`, schema id `SCHEMA`; a change that
removes or renames a field bumps the schema number.

Chart series the HTML report draws (`Check.series[name]` is a list of row dicts):

- check "srm",       series "daily":   {"date": "YYYY-MM-DD", "counts": {arm: cumulative units},
                                        "p_fixed": float, "p_anytime": float}
- check "leakage",   series "weekly":  {"week": "YYYY-MM-DD" (Monday), "holdout_units": int,
                                        "holdout_share": float, "impressions": int, "clicks": int}
- check "balance",   series "smd":     {"covariate": str, "level": str | None, "smd": float,
                                        "chance": float | None (the SMD's SE under randomization),
                                        "beyond_chance": bool (its Holm p is below balance_p)}
- check "churn",     series "by_browser": {"browser": str, "customers": int, "multi_arm": int,
                                        "share": float, "expected_share": float}
- check "srm_segments", series "worst": {"segment": str, "value": str, "p": float, "p_holm": float}

Figures (`Check.figures`) are the headline numbers kept in the history; each has a label and a
unit, so "what changed since last run" can be said for any figure without knowing the check.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from armlock.shared.report import (
    CANNOT_JUDGE,
    GATE_CHECKS,
    SEVERITY,
    Check,
    Figure,
    NotChecked,
    Status,
    Table,
    Unit,
    not_checked,
    not_checked_sentence,
    verdict_of,
    worst,
)

# the generic report model lives in the shared layer (armlock.shared.report); the audit's own
# report adds its arms, verdict text and schema id
__all__ = ["SCHEMA", "ArmInfo", "AuditReport", "json_schema", "CANNOT_JUDGE", "GATE_CHECKS", "SEVERITY", "Check", "Figure", "NotChecked", "Status", "Table", "Unit", "not_checked", "not_checked_sentence", "verdict_of", "worst"]

SCHEMA = "armlock.audit/1"


class ArmInfo(BaseModel):
    model_config = ConfigDict(extra="forbid")

    name: str
    weight: int
    role: str


class AuditReport(BaseModel):
    """The whole audit: verdict = the worst check's status, at least WARN when a gate check
    (`GATE_CHECKS`) did not run or could not judge; `not_checked` lists every such check and the
    verdict text names them in its first sentence."""

    model_config = ConfigDict(extra="forbid")

    schema_: str = Field(SCHEMA, alias="schema")
    experiment: str
    fingerprint: str
    as_of: str  # YYYY-MM-DD
    data_through: str | None = None  # YYYY-MM-DD: the last day with visits, when before as_of
    generated_at: str  # ISO 8601 UTC
    armlock_version: str
    arms: list[ArmInfo]
    verdict: Status
    verdict_text: str
    input_notes: list[str] = Field(default_factory=list)  # e.g. "timestamps had no zone; read as UTC"
    checks: list[Check]
    not_checked: list[NotChecked] = Field(default_factory=list)

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    def to_json_dict(self) -> dict[str, Any]:
        return self.model_dump(mode="json", by_alias=True)


def json_schema() -> dict[str, Any]:
    """The JSON Schema of the report (`SCHEMA`), as checked in under shared/schemas/.

    Generated from the model itself, so the published schema cannot drift from what armlock
    writes (a test compares the checked-in file with this).
    """
    schema = AuditReport.model_json_schema(by_alias=True, mode="serialization")
    return {"$schema": "https://json-schema.org/draft/2020-12/schema",
            "$id": f"https://armlock.invalid/schemas/{SCHEMA.replace('/', '-')}.schema.json",
            "title": f"armlock audit report, schema {SCHEMA}", **{k: v for k, v in schema.items() if k != "title"}}
