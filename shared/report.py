"""The report model every command shares: statuses, figures, tables, checks, and the worst status of a set.

The audit fills it with its checks, the readout's gate reads it, every output (text, markdown,
JSON, HTML, history) only reads it. `verdict_of` is the one status rule: a check that did not run
or could not judge never counts as a pass.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Status = Literal["pass", "warn", "fail", "skipped"]
SEVERITY: dict[str, int] = {"skipped": 0, "pass": 0, "warn": 1, "fail": 2}
# The checks a split cannot be called healthy (nor a readout trustworthy) without: when one of them
# did not run or could not judge, the verdict is at least WARN and says so in its first sentence.
GATE_CHECKS: tuple[str, ...] = ("srm", "integrity", "leakage")
CANNOT_JUDGE = "Cannot judge:"  # how the summary of a check that ran but could not judge begins
Unit = Literal["count", "share", "p", "ratio", "number", "date", "text"]


class Figure(BaseModel):
    """One headline number: `label` reads in a sentence ("holdout leakage"), `unit` formats it.

    A share of counted things also carries `numerator` and `denominator` (170 of 7,995 holdout
    units), so every human output can show what the share is of.
    """

    model_config = ConfigDict(extra="forbid")

    label: str
    value: float | int | str | None
    unit: Unit = "number"
    # for a share of counted things: the counts it is made of, so a reader sees its denominator
    numerator: int | None = None
    denominator: int | None = None


class Table(BaseModel):
    """A small table for the terminal, markdown and HTML reports."""

    model_config = ConfigDict(extra="forbid")

    title: str
    columns: list[str]
    rows: list[list[Any]]


class Check(BaseModel):
    """One check's outcome. `summary` is one plain sentence: what it means and what to do."""

    model_config = ConfigDict(extra="forbid")

    id: str
    title: str
    status: Status
    summary: str
    reason: str | None = None  # why it was skipped
    figures: dict[str, Figure] = Field(default_factory=dict)
    tables: list[Table] = Field(default_factory=list)
    series: dict[str, list[dict[str, Any]]] = Field(default_factory=dict)
    # False when the check did not run (skipped) or ran but could not judge (its summary starts
    # with "Cannot judge:"); derived from status and summary, so no check can forget to set it.
    judged: bool = True

    @model_validator(mode="after")
    def _judged(self) -> Check:
        if self.status == "skipped" or self.summary.startswith(CANNOT_JUDGE):
            object.__setattr__(self, "judged", False)
        return self


class NotChecked(BaseModel):
    """A check the verdict could not lean on: it did not run, or ran but could not judge."""

    model_config = ConfigDict(extra="forbid")

    id: str
    title: str
    why: str  # "not run: no exposure log given", "could not judge: too few units ..."
    gate: bool  # one of GATE_CHECKS: without it the split is never called healthy


def worst(statuses: list[str]) -> Status:
    """The worst of several statuses: fail beats warn beats pass; skipped adds nothing here (the
    verdict, `verdict_of`, also weighs what was not checked)."""
    level = max((SEVERITY[s] for s in statuses), default=0)
    return ("pass", "warn", "fail")[level]


def not_checked(checks: list[Check]) -> list[NotChecked]:
    """The checks that did not run or could not judge, with why (from `reason` or the summary)."""
    out = []
    for c in checks:
        if c.judged:
            continue
        if c.status == "skipped":
            why = "not run: " + (c.reason or c.summary.rstrip("."))
        else:
            why = "could not judge: " + c.summary.removeprefix(CANNOT_JUDGE).strip().split(". ")[0].rstrip(".")
        out.append(NotChecked(id=c.id, title=c.title, why=why, gate=c.id in GATE_CHECKS))
    return out


def verdict_of(checks: list[Check]) -> tuple[Status, list[NotChecked]]:
    """The verdict of a set of checks and what it could not check.

    One rule for every output and for the readout's gate: a check that did not run or could not
    judge never counts as a pass of a gate check; the verdict is PASS only when every gate check
    judged and no check warns or fails.
    """
    missing = not_checked(checks)
    verdict = worst([c.status for c in checks])
    if verdict == "pass" and (any(m.gate for m in missing) or not any(c.id in GATE_CHECKS for c in checks)):
        verdict = "warn"
    return verdict, missing


def not_checked_sentence(missing: list[NotChecked]) -> str:
    """'Could not check: Leakage (not run: no exposure log given).' or '' (the verdict's first sentence)."""
    if not missing:
        return ""
    return "Could not check: " + "; ".join(f"{m.title} ({m.why})" for m in missing) + "."
