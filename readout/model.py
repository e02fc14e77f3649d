"""The readout's result: per-arm table, effects, money, exposure effect, looks, gate; the JSON schema's source.

JSON output is `ReadoutReport.to_json_dict()`, schema id `SCHEMA`; a change that removes or
renames a field bumps the schema number. Money is in `money.currency` (display only). Every
interval is two-sided at 1 - `settings["alpha"]`; `anytime_lo`/`anytime_hi` is the anytime-valid
interval (valid at every look), `lo`/`hi` the fixed-horizon one (valid for one planned look).
`status` uses the audit's words: pass | warn | fail (the gate's verdict, the audit's one rule:
never pass when SRM, integrity or leakage did not run or could not judge). `trustworthy` is the
gate's result: true only when SRM, integrity and leakage all judged and no gate check fails; a
decision built on the readout is withheld when it is false. `not_checked` names what the gate
could not check.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from armlock.shared.report import Figure, NotChecked

SCHEMA = "armlock.readout/1"
Status = Literal["pass", "warn", "fail", "skipped"]


class Interval(BaseModel):
    """An estimate with its standard error, fixed-horizon interval, p against zero and anytime interval."""

    model_config = ConfigDict(extra="forbid")

    value: float | None
    se: float | None = None
    lo: float | None = None
    hi: float | None = None
    p: float | None = None
    anytime_lo: float | None = None
    anytime_hi: float | None = None


class ArmRow(BaseModel):
    """One arm's outcomes in the outcome window."""

    model_config = ConfigDict(extra="forbid")

    name: str
    role: str
    units: int
    buyers: int
    orders: int
    revenue: float
    exposure_rate: float | None  # share of the arm's units the vendor's log shows exposed
    conversion: Interval  # buyers / units
    revenue_per_unit: Interval
    orders_per_unit: Interval
    aov: Interval  # average order value: revenue / orders (delta method)


class Effect(BaseModel):
    """One metric's effect of one exposed arm against the holdout."""

    model_config = ConfigDict(extra="forbid")

    arm: str
    versus: str
    metric: str  # revenue_per_unit | conversion | orders_per_unit | aov
    label: str
    method: str  # "Welch", "CUPED (pre_revenue)", "delta method"
    primary: bool = False
    absolute: Interval
    relative: Interval | None = None  # mean_exposed / mean_holdout - 1
    mde: float | None = None  # minimum detectable absolute effect at this size
    # Holm-adjusted p across the exposed arms for this metric and method (equals p with one arm)
    p_holm: float | None = None


class Adjustment(BaseModel):
    """CUPED: covariates, the pooled theta, the variance reduction achieved, which estimate leads."""

    model_config = ConfigDict(extra="forbid")

    covariates: list[str]
    theta: list[float]
    variance_reduction: float | None
    primary: str  # "CUPED" or "raw"


class ExposureEffect(BaseModel):
    """The effect per exposed unit (Wald / complier average causal effect) of one exposed arm."""

    model_config = ConfigDict(extra="forbid")

    arm: str
    exposure_rate_exposed: float
    exposure_rate_holdout: float
    itt_exposure: float
    per_exposed_unit: Interval  # revenue per exposed unit
    assumptions: list[str]


class Money(BaseModel):
    """The channel's money figures (all exposed arms together against the holdout)."""

    model_config = ConfigDict(extra="forbid")

    currency: str
    margin: float
    exposed_units: int
    spend: float | None
    incremental_revenue: Interval
    incremental_profit: Interval
    iroas: Interval | None
    roi: Interval | None
    incremental_buyers: Interval
    cost_per_incremental_buyer: Interval | None  # hi None: unbounded
    attributed_revenue: float | None
    attributed_roas: float | None
    incremental_to_attributed: Interval | None
    # incremental profit - spend: what the channel earned after its media cost (None without spend)
    net_contribution: Interval | None = None
    # the net contribution scaled to 365 days at the test's daily rate (current spend, same effect)
    net_contribution_per_year: Interval | None = None
    days: int | None = None  # the test's days from its start to the as-of


class Look(BaseModel):
    """The primary revenue-per-unit difference as a reader would have seen it at the end of a day."""

    model_config = ConfigDict(extra="forbid")

    date: str
    units: dict[str, int]
    difference: float | None
    lo: float | None
    hi: float | None
    anytime_lo: float | None
    anytime_hi: float | None


class Decision(BaseModel):
    """Did the channel pay? The answer against break-even on the interval valid for this look.

    `basis` is "anytime" at every look before the planned size, "fixed" at the planned final look;
    `lo`/`hi` is that interval of iROAS. `withheld`: the audit gate is not passed, so the answer
    is "not_yet_known" whatever the figures say. `p_breakeven` (two-sided, iROAS = break-even) is
    given only at the planned final look, where a fixed-horizon p is valid.
    """

    model_config = ConfigDict(extra="forbid")

    answer: Literal["pays", "does_not_pay", "not_yet_known"]
    basis: Literal["anytime", "fixed"]
    reason: str
    action: str  # what follows from the answer
    withheld: bool = False
    breakeven_iroas: float
    breakeven_source: str
    iroas: float | None
    lo: float | None
    hi: float | None
    level: int  # the interval's level in percent
    p_breakeven: float | None = None
    final_look: bool
    stage: str  # why this look is (or is not) the planned final look
    planned_units: int | None = None
    planned_end: str | None = None
    units: int


class Design(BaseModel):
    """The test's design in one place, for the page a finance lead reads."""

    model_config = ConfigDict(extra="forbid")

    start: str
    as_of: str
    planned_end: str | None
    days: int
    holdout_share: float  # share of units the split holds out (from the arm weights)
    arms: dict[str, str]  # name -> role
    units: int
    planned_units: int | None


NOT_COVERED = [
    "Sales in the shop's app, by phone or in stores: only the orders file's orders are counted.",
    "Effects after the as-of date or beyond the outcome window (longer-term loyalty, repeat buying later).",
    "What happens at another spend level: the figures hold at the spend of this test.",
    "Visitors the split never saw (no first visit recorded): they are in neither arm.",
]


class GateCheck(BaseModel):
    """One audit check as the readout's gate reads it."""

    model_config = ConfigDict(extra="forbid")

    id: str
    title: str
    status: Status
    summary: str


class TwoHoldouts(BaseModel):
    """The 2x2 readout with a concurrent test (`readout/factorial.py`): each channel's effect on
    revenue per unit and their interaction, on the units both tests shared. `effects` rows:
    {label, estimate, se, lo, hi, p} (fixed-horizon 95% intervals); `cells` rows: {this, other,
    units, revenue_per_unit}. `note` says why there are no effects when there are none."""

    model_config = ConfigDict(extra="forbid")

    with_test: str
    shared_units: int
    cells: list[dict[str, Any]] = Field(default_factory=list)
    effects: list[dict[str, Any]] = Field(default_factory=list)
    note: str | None = None


class ReadoutReport(BaseModel):
    """The whole readout: `status` is the audit gate's verdict; the headline says what it means."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    decision: Decision  # first: the answer every output leads with
    schema_: str = Field(SCHEMA, alias="schema")
    experiment: str
    fingerprint: str
    as_of: str
    generated_at: str
    armlock_version: str
    status: Status
    trustworthy: bool
    headline: str
    reading_advice: str  # which interval a weekly reader should use
    estimand: str = ""  # what is estimated, in one line (units, outcome, period)
    design: Design | None = None
    not_covered: list[str] = Field(default_factory=list)  # what the test does not measure
    cautions: list[str] = Field(default_factory=list)
    gate: list[GateCheck] = Field(default_factory=list)
    not_checked: list[NotChecked] = Field(default_factory=list)
    arms: list[ArmRow]
    effects: list[Effect]
    adjustment: Adjustment | None = None
    exposure: list[ExposureEffect] = Field(default_factory=list)
    money: Money
    looks: list[Look] = Field(default_factory=list)
    settings: dict[str, Any] = Field(default_factory=dict)
    input_notes: list[str] = Field(default_factory=list)
    figures: dict[str, Figure] = Field(default_factory=dict)  # the headline numbers kept in the history
    two_holdouts: list[TwoHoldouts] = Field(default_factory=list)  # with --alongside: the 2x2 readouts

    def to_json_dict(self) -> dict[str, Any]:
        return self.model_dump(mode="json", by_alias=True)
