"""What a plan is made from (`PlanInputs`, checked with clear errors) and what it returns (`Plan`, `Cell`)."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

from armlock.assign import InputError

SCHEMA = "armlock.plan/1"
DEFAULT_SHARES = (0.05, 0.10, 0.20, 0.30, 0.50)
DEFAULT_WEEKS = tuple(range(2, 27))
DEFAULT_MAX_WEEKS = 12
MIN_WEEKS = 2  # common practice: whole weeks, at least two, so every weekday is seen twice

# field -> the command-line option that sets it, so an error names what the user typed
FLAGS = {
    "weekly_units": "--weekly-units", "revenue_mean": "--revenue-mean", "revenue_sd": "--revenue-sd",
    "conversion": "--conversion", "order_value": "--order-value", "order_value_sd": "--order-value-sd",
    "exposure_rate": "--exposure-rate", "effect": "--effect", "lift": "--lift",
    "target_iroas": "--target-iroas", "weekly_spend": "--weekly-spend", "margin": "--margin",
    "alpha": "--alpha", "power": "--power", "rho": "--rho", "against": "--against",
}


# field -> (lowest, highest, what it is): magnitudes a shop can have (our choice); outside them the arithmetic
# would overflow or the plan would be meaningless, so the user gets the range instead of an internal error
RANGES = {
    "weekly_units": (1.0, 1e9, "new units a week lie between 1 and 1,000,000,000"),
    "revenue_mean": (1e-6, 1e9, "revenue per unit lies between 0.000001 and 1,000,000,000"),
    "revenue_sd": (1e-6, 1e12, "the SD of revenue per unit lies between 0.000001 and 1,000,000,000,000"),
    "exposure_rate": (1e-3, 1.0, "the share of the exposed arm reached lies between 0.1% and 100%"),
    "effect": (1e-12, 1e12, "an effect per reached unit lies between 0.000000000001 and 1,000,000,000,000"),
    "target_iroas": (1e-6, 1e6, "a target iROAS lies between 0.000001 and 1,000,000"),
    "weekly_spend": (1e-6, 1e12, "weekly spend lies between 0.000001 and 1,000,000,000,000"),
    "order_value": (1e-6, 1e9, "an order value lies between 0.000001 and 1,000,000,000"),
    "order_value_sd": (0.0, 1e12, "the SD of order values lies between 0 and 1,000,000,000,000"),
    "conversion": (1e-9, 1.0, "conversion lies between 0.0000001% and 100%"),
    "margin": (1e-4, 1.0, "a gross margin lies between 0.01% and 100%"),
}
MAX_CV = 10_000  # revenue SD / mean above this is a unit or currency mix-up, not a shop (our choice)
MAX_LIFT = 10.0  # +1000% per reached unit: the largest lift a plan sizes (our choice)
MIN_LIFT = 1e-6  # +0.0001% per reached unit: the smallest (our choice; far smaller squares underflow)
AGAINST = ("zero", "break-even")  # what the test must tell the channel's effect from


def _bad(name: str, why: str) -> InputError:
    return InputError(f"{FLAGS.get(name, name)}: {why}")


@dataclass(frozen=True)
class PlanInputs:
    """The shop and the test as numbers. Effects are per exposed unit; spend is with nobody held out.

    Give revenue per unit either as `revenue_mean` and `revenue_sd`, or as `conversion` and
    `order_value` (with `order_value_sd` if order values vary; see `from_conversion`). Give at most one
    target: `effect` (currency per exposed unit), `lift` (relative to revenue per unit) or
    `target_iroas` (needs `weekly_spend`).
    """

    weekly_units: float
    revenue_mean: float
    revenue_sd: float
    exposure_rate: float = 1.0
    effect: float | None = None
    lift: float | None = None
    target_iroas: float | None = None
    weekly_spend: float | None = None
    margin: float | None = None
    alpha: float = 0.05
    power: float = 0.8
    rho: float = 0.0
    conversion: float | None = None
    order_value: float | None = None
    order_value_sd: float | None = None
    equal_variance: bool = False  # True: the textbook formula, both arms with the same SD under the effect
    against: str = "zero"  # "break-even": size the test to tell the target iROAS from break-even (1 / margin)
    currency: str = ""  # shown beside amounts (e.g. USD); empty: amounts without a code

    def __post_init__(self) -> None:
        for name in ("weekly_units", "revenue_mean", "revenue_sd", "exposure_rate", "alpha", "power", "rho",
                     "effect", "lift", "target_iroas", "weekly_spend", "margin", "conversion", "order_value",
                     "order_value_sd"):
            v = getattr(self, name)
            if v is not None and (isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)):
                raise _bad(name, f"must be a finite number, got {v!r}")
        if self.weekly_units <= 0:
            raise _bad("weekly_units", f"must be positive, got {self.weekly_units:g}: with no new units a week "
                       "there is no test to plan")
        if self.revenue_mean <= 0:
            raise _bad("revenue_mean", f"must be positive, got {self.revenue_mean:g} (revenue per unit over the test)")
        if self.revenue_sd <= 0:
            raise _bad("revenue_sd", f"must be positive, got {self.revenue_sd:g}: revenue that never varies "
                       "between units is not real data (check the SD, or give --conversion and --order-value)")
        for name, (lo, hi, what) in RANGES.items():  # magnitudes a shop can have (our choice), so no number overflows
            v = getattr(self, name)
            if v is not None and not lo <= v <= hi:
                raise _bad(name, f"{v:g} is out of range: {what}")
        cv = self.revenue_sd / self.revenue_mean
        if cv > MAX_CV:
            raise _bad("revenue_sd", f"{self.revenue_sd:g} is {cv:,.0f} times the mean {self.revenue_mean:g}; above "
                       f"{MAX_CV:,} times no normal-based plan holds (check that both are per unit, in one currency)")
        if not 0 < self.exposure_rate <= 1:
            raise _bad("exposure_rate", f"must lie in (0, 1], got {self.exposure_rate:g} (the share of the "
                       "exposed arm the vendor actually reaches; write 60% or 0.6)")
        if not 1e-6 <= self.alpha < 0.5:
            raise _bad("alpha", f"must lie in (0, 0.5) (and be at least 0.000001), got {self.alpha:g}: it is the chance of a false "
                       "'the channel works' you accept, e.g. 5% or 0.05")
        if not 0.5 <= self.power < 1:
            raise _bad("power", f"must lie in [0.5, 1), got {self.power:g}: the chance of detecting the target "
                       "when it is real, e.g. 80% or 0.8 (below 50% the test misses more often than it finds)")
        if not -1 < self.rho < 1:
            raise _bad("rho", f"must lie in (-1, 1), got {self.rho:g} (the correlation of revenue with its "
                       "pre-period covariate; 0 when there is none)")
        targets = [n for n in ("effect", "lift", "target_iroas") if getattr(self, n) is not None]
        if len(targets) > 1:
            raise InputError(f"give one target, not {' and '.join(FLAGS[n] for n in targets)}")
        for name in targets:
            if getattr(self, name) <= 0:
                raise _bad(name, f"must be positive, got {getattr(self, name):g}")
        # a target so small that its square underflows sizes nothing (an internal error once, issue #20)
        small = {"lift": (self.lift, MIN_LIFT), "effect": (self.effect, MIN_LIFT * self.revenue_mean)}
        for name, (v, floor) in small.items():
            if v is not None and v < floor:
                raise _bad(name, f"{v:g} is too small to plan for: below {floor:g} (a lift of {MIN_LIFT * 100:g}% per "
                           "reached unit) no test of any length can tell it from zero")
        if self.lift is not None and self.lift > MAX_LIFT:
            raise _bad("lift", f"{self.lift:g} means +{self.lift * 100:,.0f}% per reached unit, more than the "
                       f"+{MAX_LIFT * 100:,.0f}% a plan can size; write the lift as a percent, e.g. 8%")
        if self.effect is not None and self.effect > MAX_LIFT * self.revenue_mean:
            raise _bad("effect", f"{self.effect:g} per reached unit is more than {MAX_LIFT:g} times revenue per unit "
                       f"({self.revenue_mean:g}); the effect is extra revenue per reached unit, in currency")
        if self.target_iroas is not None and self.weekly_spend is not None:
            implied = self.target_iroas * self.weekly_spend / (self.weekly_units * self.exposure_rate)
            if implied > MAX_LIFT * self.revenue_mean:
                raise _bad("target_iroas", f"{self.target_iroas:g} at a weekly spend of {self.weekly_spend:g} means at "
                           f"least {implied:,.6g} of extra revenue per reached unit, more than {MAX_LIFT:g} times revenue "
                           f"per unit ({self.revenue_mean:g}); check --weekly-spend (the whole spend a week) and "
                           "--weekly-units")
        if self.weekly_spend is not None and self.weekly_spend <= 0:
            raise _bad("weekly_spend", f"must be positive, got {self.weekly_spend:g}")
        if self.target_iroas is not None and self.weekly_spend is None:
            raise _bad("target_iroas", "needs --weekly-spend (the iROAS is incremental revenue per unit of spend)")
        if self.margin is not None and not 0 < self.margin <= 1:
            raise _bad("margin", f"must lie in (0, 1], got {self.margin:g} (gross margin as a share of revenue, "
                       "e.g. 40% or 0.4)")
        if self.against not in AGAINST:
            raise _bad("against", f"must be one of {', '.join(AGAINST)}, got {self.against!r}")
        if self.against == "break-even" and (self.margin is None or self.weekly_spend is None):
            raise _bad("against", "break-even needs --margin and --weekly-spend (break-even iROAS is 1 / margin)")

    @classmethod
    def from_conversion(cls, *, conversion: float, order_value: float, order_value_sd: float = 0.0,
                        **rest: Any) -> PlanInputs:
        """Revenue per unit from a conversion rate p and order values (mean v, SD s), one order per buyer.

        mean = p v;  variance = p (s^2 + v^2) - (p v)^2  (a buyer's revenue is one order value).
        """
        if not 0 < conversion < 1:
            raise _bad("conversion", f"must lie in (0, 1), got {conversion:g} (the share of units that buy)")
        if order_value <= 0:
            raise _bad("order_value", f"must be positive, got {order_value:g}")
        if order_value_sd < 0:
            raise _bad("order_value_sd", f"must not be negative, got {order_value_sd:g}")
        for name, v in (("order_value", order_value), ("order_value_sd", order_value_sd), ("conversion", conversion)):
            lo, hi, what = RANGES[name]
            if not lo <= v <= hi:
                raise _bad(name, f"{v:g} is out of range: {what}")
        mean = conversion * order_value
        var = conversion * (order_value_sd ** 2 + order_value ** 2) - mean ** 2
        return cls(revenue_mean=mean, revenue_sd=math.sqrt(var), conversion=conversion, order_value=order_value,
                   order_value_sd=order_value_sd, **rest)


@dataclass(frozen=True)
class Estimate:
    """One figure the planner estimated from the pre-period files, and from how much data."""

    name: str
    value: float
    units: int
    how: str


@dataclass(frozen=True)
class Cell:
    """One holdout share run for one number of weeks. Differences are arm-level per unit unless named."""

    share: float
    weeks: int
    units: float
    holdout_units: float
    exposed_units: float
    se: float  # of the arm difference in revenue per unit, without CUPED
    mde: float  # arm-level difference detectable without CUPED
    mde_cuped: float  # the same with the pre-period covariate (variance x (1 - rho^2))
    mde_relative: float  # mde / revenue per unit
    mde_relative_cuped: float
    mde_per_exposed: float  # the planned MDE (CUPED if rho != 0) divided by the exposure rate
    mde_weekly_reading: float  # planned MDE when read every week at the readout's anytime boundary (simulated)
    mde_conversion: float | None  # change in conversion rate detectable (rate difference), if known
    iroas_vs_zero: float | None  # smallest iROAS distinguishable from zero (needs spend)
    iroas_vs_break_even: float | None  # smallest iROAS distinguishable from break-even (needs spend, margin)
    revenue_forgone: float | None  # holdout revenue lost if the channel works at the target effect
    profit_forgone: float | None  # margin x revenue forgone minus the spend saved on the holdout
    power_at_target: float | None  # power of this cell against the target (planned variance)
    power_weekly_reading: float | None  # the same when read every week at the readout's anytime boundary (simulated)


@dataclass(frozen=True)
class ShareSummary:
    """One holdout share against the target: the weeks it needs, checked by simulation, and what they cost."""

    share: float
    target_difference: float  # arm-level difference per unit at the target (an iROAS target differs by share)
    weeks_needed: float  # exact (fractional) weeks, normal arithmetic, planned variance
    weeks_needed_raw: float  # without CUPED
    weeks_needed_weekly_reading: float  # read every week with the readout's anytime interval (simulated boundary)
    weekly_factor: float  # weeks read weekly / weeks read once
    weeks: int | None  # whole weeks to run: the fewest where the simulated readout test is sound; None: not in 10 years
    weeks_normal: int | None  # whole weeks by the normal arithmetic alone (at least MIN_WEEKS)
    revenue_forgone: float | None
    profit_forgone: float | None
    false_win_rate: float | None = None  # simulated false 'the channel works' rate at `weeks` (alpha is the plan)
    power_simulated: float | None = None  # simulated power at `weeks`
    false_win_rate_normal: float | None = None  # simulated false-win rate at `weeks_normal`
    weeks_range: tuple[int, int] | None = None  # 95% range of the weeks from the pre-period's sampling error


@dataclass(frozen=True)
class Recommendation:
    """The advice. status (machine value; people read the words of render.STATUS_WORDS): pass (a sound design
    meets the target in time: RECOMMENDED), warn (only later than allowed: TOO LONG), fail (no sound design
    within 10 years: OUT OF REACH), skipped (no target given: NO TARGET)."""

    status: str
    share: float | None
    weeks: int | None
    sentence: str
    power: float | None = None  # the design's power against the target, as simulated for the readout's test
    false_win_rate: float | None = None  # its simulated false 'the channel works' rate (the plan's alpha)


@dataclass
class Plan:
    """The whole plan: inputs, target, the share x weeks grid, per-share summaries and the advice."""

    inputs: PlanInputs
    shares: list[float]
    weeks: list[int]
    max_weeks: int
    cells: list[Cell]
    target_difference: float | None  # arm-level difference per unit at the target
    target_per_exposed: float | None
    target_iroas: float | None
    break_even_iroas: float | None
    anytime_factor: float  # anytime-valid half-width / SE at the planned end
    z_alpha: float
    summaries: list[ShareSummary]
    recommendation: Recommendation
    estimates: list[Estimate] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    assumptions: list[str] = field(default_factory=list)
    prefer: str = "balanced"  # how the recommendation weighs weeks against revenue forgone
    shape: tuple[float, float, float] = (0.0, 0.0, 0.0)  # simulated revenue: share buying, lognormal mu, sigma
    resampled: bool = False  # True: the soundness check resampled the pre-period's own revenue per unit

    def summary(self, share: float) -> ShareSummary:
        for s in self.summaries:
            if math.isclose(s.share, share):
                return s
        raise KeyError(share)

    @property
    def cuped(self) -> bool:
        return self.inputs.rho != 0

    def cell(self, share: float, weeks: int) -> Cell:
        for c in self.cells:
            if c.weeks == weeks and math.isclose(c.share, share):
                return c
        raise KeyError((share, weeks))

    def to_dict(self) -> dict[str, Any]:
        """The JSON form (schema armlock.plan/1)."""
        from armlock.assign import __version__

        return {
            "schema": SCHEMA,
            "armlock_version": __version__,
            "inputs": asdict(self.inputs),
            "estimated": [asdict(e) for e in self.estimates],
            "target": None if self.target_difference is None else {
                "difference_per_unit": self.target_difference,
                "per_exposed_unit": self.target_per_exposed,
                "relative": self.target_difference / self.inputs.revenue_mean,
                "iroas": self.target_iroas,
            },
            "break_even_iroas": self.break_even_iroas,
            "cuped": self.cuped,
            "weekly_reading": {
                "anytime_factor": self.anytime_factor, "fixed_factor": self.z_alpha,
                "width_ratio": self.anytime_factor / self.z_alpha,
                # weeks read every week / weeks read once, at the readout's boundary (simulated), for the
                # recommended share (else the first); per share in by_share[].weekly_factor
                "weeks_factor": next((s.weekly_factor for s in self.summaries
                                      if self.recommendation.share is not None
                                      and math.isclose(s.share, self.recommendation.share)),
                                     self.summaries[0].weekly_factor if self.summaries else None),
            },
            "against": self.inputs.against,
            "prefer": self.prefer,
            "simulated_revenue": {"buying_share": self.shape[0], "order_value_log_mean": self.shape[1],
                                  "order_value_log_sd": self.shape[2], "resampled_pre_period": self.resampled},
            "max_weeks": self.max_weeks,
            "shares": self.shares,
            "weeks": self.weeks,
            "cells": [asdict(c) for c in self.cells],
            "by_share": [asdict(s) for s in self.summaries],
            "recommendation": asdict(self.recommendation),
            "assumptions": self.assumptions,
            "notes": self.notes,
        }
