"""A plan from what the user gave: numbers, pre-period files or both, merged into the planner's inputs, and the spec it writes.

The command line parses its options into a `PlanRequest` (shares and levels already fractions);
`plan_for` estimates from the files, lets numbers given override the estimates (and says so),
builds the inputs, plans, and writes the recommended spec when asked. The command then formats.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from armlock.assign import InputError, Spec, SpecError

from .compute import make_plan
from .model import Plan, PlanInputs
from .spec_out import write_spec_atomically


@dataclass
class PlanRequest:
    """What was asked for, as the options gave it (None: not given)."""

    weekly_units: float | None = None
    revenue_mean: float | None = None
    revenue_sd: float | None = None
    conversion: float | None = None
    order_value: float | None = None
    order_value_sd: float | None = None
    exposure_rate: float | None = None
    effect: float | None = None
    lift: float | None = None
    target_iroas: float | None = None
    weekly_spend: float | None = None
    margin: float | None = None
    alpha: float | None = 0.05
    power: float | None = 0.8
    equal_variance: bool = False
    rho: float | None = None
    visits: Path | None = None
    orders: Path | None = None
    spec_path: Path | None = None
    covariate: str | None = None
    visits_unit: str | None = None
    visits_time: str | None = None
    orders_unit: str | None = None
    orders_revenue: str | None = None
    shares: list[float] = field(default_factory=lambda: [0.05, 0.1, 0.2, 0.3, 0.5])
    weeks: list[int] = field(default_factory=lambda: list(range(2, 27)))
    max_weeks: int = 12
    prefer: str = "balanced"
    against: str = "zero"
    currency: str | None = None
    write_spec: str | None = None
    spec_out: Path | None = None
    force: bool = False


@dataclass
class PlanOutcome:
    """The plan, and the spec written for it (with where) when --write-spec asked for one."""

    plan: Plan
    spec: Spec | None = None
    spec_path: Path | None = None


def pre_period_columns(spec_path: Path | None, covariate: str | None, orders_unit: str | None, orders_revenue: str | None,
             visits_unit: str | None = None, visits_time: str | None = None) -> Any:
    """Where the pre-period files' columns are: the options, else the spec's maps, else the default names; each
    column remembers who named it, so an error quotes the option or the spec setting actually used."""
    from armlock.plan.estimate import PrePeriodColumns

    kw: dict[str, Any] = {}
    named: dict[str, str] = {}
    if spec_path is not None:
        from armlock.assign import load_spec

        spec = load_spec(spec_path)  # the column maps only: planning does not use the split, so no lock check
        kw.update(unit_id=spec.audit.visits.unit_id, first_seen=spec.audit.visits.first_seen,
                  visits_delimiter=spec.audit.visits.delimiter,
                  first_seen_format=spec.audit.visits.first_seen_format)
        named.update(unit_id=f"{spec_path}: [audit.visits] unit_id", first_seen=f"{spec_path}: [audit.visits] first_seen")
        ro = getattr(spec, "readout", None)  # the readout's [readout] tables, in specs that carry them
        orders = getattr(ro, "orders", None)
        if orders is not None:
            if not getattr(orders, "unit_id", "unit_id") and not orders_unit:
                raise InputError(f"{spec_path}: [readout.orders] keys orders by customer, not by visitor id; the "
                                 "planner needs the visitor id of each order: give --orders-unit-column")
            kw.update(orders_unit_id=getattr(orders, "unit_id", None) or "unit_id",
                      orders_revenue=getattr(orders, "revenue", "revenue"),
                      orders_order_id=getattr(orders, "order_id", "") or "",
                      orders_delimiter=getattr(orders, "delimiter", ",") or ",")
            named.update(orders_unit_id=f"{spec_path}: [readout.orders] unit_id",
                         orders_revenue=f"{spec_path}: [readout.orders] revenue")
        if ro is not None:  # the covariates the readout will adjust with (none: the readout uses no CUPED)
            kw["covariates"] = tuple(getattr(ro, "covariates", ()) or ())
            named["covariates"] = f"{spec_path}: [readout] covariates"
    if covariate:
        kw["covariates"] = tuple(c.strip() for c in covariate.split(",") if c.strip())
        named["covariates"] = "--covariate"
    for key, value, flag in (("unit_id", visits_unit, "--visits-unit-column"),
                             ("first_seen", visits_time, "--visits-time-column"),
                             ("orders_unit_id", orders_unit, "--orders-unit-column"),
                             ("orders_revenue", orders_revenue, "--orders-revenue-column")):
        if value:
            kw[key] = value
            named[key] = flag
    return PrePeriodColumns(**kw, named_by=named)



def plan_for(req: PlanRequest) -> PlanOutcome:
    """Estimate, merge, plan and (when asked) write the spec: see the module's docstring."""
    weekly_units = req.weekly_units
    revenue_mean = req.revenue_mean
    revenue_sd = req.revenue_sd
    the_conversion = req.conversion
    order_value = req.order_value
    order_value_sd = req.order_value_sd
    reach = req.exposure_rate
    effect = req.effect
    the_lift = req.lift
    target_iroas = req.target_iroas
    weekly_spend = req.weekly_spend
    the_margin = req.margin
    the_alpha = req.alpha
    the_power = req.power
    equal_variance = req.equal_variance
    rho = req.rho
    visits = req.visits
    orders = req.orders
    spec_path = req.spec_path
    covariate = req.covariate
    visits_unit = req.visits_unit
    visits_time = req.visits_time
    orders_unit = req.orders_unit
    orders_revenue = req.orders_revenue
    shares = req.shares
    week_list = req.weeks
    max_weeks = req.max_weeks
    prefer = req.prefer
    against = req.against
    currency = req.currency
    write_spec = req.write_spec
    spec_out = req.spec_out
    force = req.force
    dest: Path | None = None
    pre: Any = None  # the pre-period's estimates, when files were given
    if write_spec is not None:  # refuse before any work, so a plan is never printed for a spec that cannot be written
        import re

        from armlock.assign.spec import EXPERIMENT_PATTERN

        if not re.match(EXPERIMENT_PATTERN, write_spec):
            raise SpecError(f"--write-spec: experiment name {write_spec!r}: use letters, digits, '.', '_' or '-' "
                            "(at most 100), starting with a letter or digit")
        dest = spec_out or Path(f"{write_spec}.toml")
        if dest.exists() and not force:
            raise SpecError(f"{dest}: already exists; choose another --spec-out or pass --force")
    estimates: list[Any] = []
    notes: list[str] = []
    found: dict[str, Any] = {}
    if (visits is None) != (orders is None):
        raise InputError("give both --visits and --orders to estimate from pre-period files (or neither, "
                         "and give the numbers)")
    file_options = {"--spec": spec_path, "--covariate": covariate, "--visits-unit-column": visits_unit,
                    "--visits-time-column": visits_time, "--orders-unit-column": orders_unit,
                    "--orders-revenue-column": orders_revenue}
    if visits is not None and orders is not None:
        from .estimate import estimate_pre_period

        cols = pre_period_columns(spec_path, covariate, orders_unit, orders_revenue, visits_unit, visits_time)
        pre = estimate_pre_period(visits, orders, cols)
        found, estimates, notes = pre.values, pre.estimates, pre.notes
    elif any(v is not None for v in file_options.values()):
        given_opts = [k for k, v in file_options.items() if v is not None]
        raise InputError(f"{', '.join(given_opts)}: only apply with --visits and --orders (the pre-period files)")
    given = {k: v for k, v in {
        "weekly_units": weekly_units, "revenue_mean": revenue_mean, "revenue_sd": revenue_sd, "rho": rho,
    }.items() if v is not None}
    if given and found:
        notes.append("Given on the command line instead of the estimate: " + ", ".join(
            f"{k.replace('_', ' ')} {v:g}" for k, v in given.items()))
    if reach is None:
        notes.insert(0, "--exposure-rate was not given, so every unit of the exposed arm is assumed reached by the "
                        "vendor (full reach); real reach is usually lower and dilutes the effect the arms show.")
    if currency is not None and not (len(currency) == 3 and currency.isalpha() and currency.isupper()):
        raise InputError(f"--currency: {currency!r} is not a three-letter currency code such as USD (ISO 4217)")
    if currency is None and spec_path is not None and visits is not None:
        from armlock.assign import load_spec

        currency = getattr(getattr(load_spec(spec_path), "readout", None), "currency", None)
    common: dict[str, Any] = dict(exposure_rate=1.0 if reach is None else reach, effect=effect, lift=the_lift,
                  target_iroas=target_iroas, weekly_spend=weekly_spend, margin=the_margin, alpha=the_alpha,
                  power=the_power, equal_variance=equal_variance, against=against, currency=currency or "")
    units = given.get("weekly_units", found.get("weekly_units"))
    the_rho = given.get("rho", found.get("rho", 0.0))
    if units is None:
        raise InputError("--weekly-units: how many new units a week would enter the test? (or give --visits and --orders)")
    if the_conversion is not None or order_value is not None:
        if the_conversion is None or order_value is None:
            raise InputError("--conversion and --order-value go together")
        if revenue_mean is not None or revenue_sd is not None:
            raise InputError("give revenue per unit as --revenue-mean and --revenue-sd, or as --conversion and "
                             "--order-value, not both")
        inputs = PlanInputs.from_conversion(conversion=the_conversion, order_value=order_value,
                                            order_value_sd=order_value_sd or 0.0, weekly_units=units, rho=the_rho,
                                            **common)
    else:
        if order_value_sd is not None:
            raise InputError("--order-value-sd goes with --conversion and --order-value")
        mean = given.get("revenue_mean", found.get("revenue_mean"))
        sd = given.get("revenue_sd", found.get("revenue_sd"))
        if mean is None or sd is None:
            raise InputError("give revenue per unit: --revenue-mean and --revenue-sd, or --conversion and "
                             "--order-value (or --visits and --orders to estimate them)")
        extra = {k: found[k] for k in ("conversion", "order_value") if k in found and not given}
        inputs = PlanInputs(weekly_units=units, revenue_mean=mean, revenue_sd=sd, rho=the_rho, **extra, **common)
    spread = None
    if found and "revenue_sd" not in given:  # the SD was estimated: the weeks carry its sampling error
        spread = pre.cv2_range if (the_lift is not None and "revenue_mean" not in given) else pre.variance_range
        notes.append(f"The weeks carry a 95% range from the pre-period's sampling error of the "
                     f"{'revenue SD relative to the mean' if spread is pre.cv2_range else 'revenue SD'} "
                     f"(x {spread[0]:.2f} to x {spread[1]:.2f}; large-sample moments of the sample variance and "
                     "mean, the delta method, Casella & Berger 2002, §5.5.4).")
    plan = make_plan(inputs, shares=shares, weeks=week_list, max_weeks=max_weeks, estimates=estimates, notes=notes,
                     prefer=prefer, spread=spread,
                     revenue_sample=pre.revenue_per_unit if found and not ({"revenue_mean", "revenue_sd"} & set(given))
                     and the_conversion is None else None)
    if write_spec is not None and plan.recommendation.share is None:
        raise InputError(f"--write-spec: no spec written, because there is no recommended share "
                         f"({plan.recommendation.status}): {plan.recommendation.sentence}")
    spec = None
    if write_spec is not None:  # written (and validated) before the plan is printed: a failure leaves nothing
        assert plan.recommendation.share is not None and dest is not None
        weeks_planned = plan.recommendation.weeks or 0
        spec = write_spec_atomically(write_spec, plan.recommendation.share, dest, force=force, carry=dict(
            planned_units=int(round(inputs.weekly_units * weeks_planned)), margin=inputs.margin,
            alpha=inputs.alpha, power=inputs.power))
    return PlanOutcome(plan=plan, spec=spec, spec_path=dest)
