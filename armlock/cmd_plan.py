"""`armlock plan`: before the test, how big a holdout, for how long, and what it costs."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer

from armlock.assign import InputError, SpecError

from .common import emit, err

FORMATS = ("text", "markdown", "json", "html")


def parse_shares(text: str) -> list[float]:
    """'5%,10%,0.2' -> [0.05, 0.1, 0.2]; a bare number must be a share in (0, 1)."""
    out = []
    for part in filter(None, (p.strip() for p in text.split(","))):
        try:
            v = float(part[:-1]) / 100 if part.endswith("%") else float(part)
        except ValueError:
            raise InputError(f"--holdout-shares: {part!r} is not a share; write 0.05 or 5%") from None
        if not 0 < v < 1:
            raise InputError(f"--holdout-shares: {part} is outside (0, 1); write 0.05 or 5%")
        out.append(round(v, 10))
    if not out:
        raise InputError("--holdout-shares: give at least one share, e.g. 5%,10%,20%")
    return out


def parse_weeks(text: str) -> list[int]:
    """'2-26' or '2,4,8,12' (or both, comma-separated) -> whole weeks."""
    out: list[int] = []
    for part in filter(None, (p.strip() for p in text.split(","))):
        lo, dash, hi = part.partition("-")
        try:
            nums = list(range(int(lo), int(hi) + 1)) if dash else [int(part)]
        except ValueError:
            raise InputError(f"--weeks: {part!r} is not a whole number of weeks or a range like 2-26") from None
        if dash and not nums:
            raise InputError(f"--weeks: {part!r} runs from high to low; write it as {hi.strip()}-{lo.strip()}")
        if min(nums) < 1:
            raise InputError(f"--weeks: {part!r} must give whole weeks of at least 1")
        out += nums
    if not out:
        raise InputError("--weeks: give at least one duration, e.g. 2-26")
    return sorted(set(out))


def _columns(spec_path: Path | None, covariate: str | None, orders_unit: str | None, orders_revenue: str | None) -> Any:
    from armlock.plan.estimate import PrePeriodColumns

    kw: dict[str, Any] = {}
    if spec_path is not None:
        from armlock.assign import load_spec

        spec = load_spec(spec_path)  # the column maps only: planning does not use the split, so no lock check
        kw.update(unit_id=spec.audit.visits.unit_id, first_seen=spec.audit.visits.first_seen,
                  covariates=tuple(spec.audit.covariates), visits_delimiter=spec.audit.visits.delimiter,
                  first_seen_format=spec.audit.visits.first_seen_format)
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
        if getattr(ro, "covariates", None):
            kw["covariates"] = tuple(dict.fromkeys([*ro.covariates, *spec.audit.covariates]))
    if covariate:
        kw.update(covariates=(covariate,), covariate_explicit=True)
    if orders_unit:
        kw["orders_unit_id"] = orders_unit
    if orders_revenue:
        kw["orders_revenue"] = orders_revenue
    return PrePeriodColumns(**kw)


def carry_plan_into_spec_text(text: str, *, planned_units: int, margin: float | None, alpha: float,
                              power: float) -> str:
    """Set the `[readout]` keys the plan decides (planned units, margin, alpha, power) in a new spec's text.

    Only the first `key = value` line of each key after the `[readout]` header is touched; a spec without
    that section is returned unchanged.
    """
    import re

    head = re.search(r"(?m)^\[readout\][ \t]*$", text)
    if head is None:
        return text
    start = head.end()
    nxt = re.search(r"(?m)^\[(?!readout\])", text[start:])
    end = start + nxt.start() if nxt else len(text)
    section = text[start:end]
    values = {"planned_units": f"{planned_units}", "alpha": f"{alpha:g}", "power": f"{power:g}"}
    if margin is not None:
        values["margin"] = f"{margin:g}"
    def put(m: re.Match[str], v: str) -> str:  # keep the comment in its column when the value fits
        old_width = len(m.group(2)) + len(m.group(3))
        pad = max(old_width - len(v), 1) if m.group(4) else 0
        return f"{m.group(1)}{v}{' ' * pad}{m.group(4) or ''}"

    for key, value in values.items():
        section = re.sub(rf"(?m)^({key}[ \t]*=[ \t]*)([^#\n]*?)([ \t]*)(#.*)?$",
                         lambda m, v=value: put(m, v), section, count=1)
    return text[:start] + section + text[end:]


def plan_cmd(
    weekly_units: float = typer.Option(None, "--weekly-units", help="New units (visitors) a week who would enter the test."),
    revenue_mean: float = typer.Option(None, "--revenue-mean", help="Revenue per unit over the test, mean (units without orders count 0)."),
    revenue_sd: float = typer.Option(None, "--revenue-sd", help="Revenue per unit, standard deviation (often 5-20 times the mean)."),
    conversion: float = typer.Option(None, "--conversion", help="Instead of mean and SD: the share of units that order, e.g. 0.02."),
    order_value: float = typer.Option(None, "--order-value", help="With --conversion: average order value."),
    order_value_sd: float = typer.Option(None, "--order-value-sd", help="With --conversion: SD of order values (default 0, which understates the spread)."),
    exposure_rate: float = typer.Option(1.0, "--exposure-rate", help="Share of the exposed arm the vendor actually reaches (0-1]; dilutes the effect."),
    effect: float = typer.Option(None, "--effect", help="Target: extra revenue per exposed (reached) unit."),
    lift: float = typer.Option(None, "--lift", help="Target: relative lift per exposed unit, e.g. 0.05 for +5% of revenue per unit."),
    target_iroas: float = typer.Option(None, "--target-iroas", help="Target: incremental revenue per unit of spend (needs --weekly-spend)."),
    weekly_spend: float = typer.Option(None, "--weekly-spend", help="The channel's weekly spend with nobody held out."),
    margin: float = typer.Option(None, "--margin", help="Gross margin as a share of revenue, e.g. 0.4 (break-even iROAS = 1 / margin)."),
    alpha: float = typer.Option(0.05, "--alpha", help="Two-sided significance level."),
    power: float = typer.Option(0.8, "--power", help="Power to plan for."),
    equal_variance: bool = typer.Option(False, "--equal-variance", help="Plan with the textbook formula (both arms keep the same SD under the effect) instead of letting the exposed arm's variance grow with the effect."),
    rho: float = typer.Option(None, "--rho", help="Correlation of revenue with its pre-period covariate, for CUPED (default 0, or estimated from --visits)."),
    visits: Path = typer.Option(None, "--visits", help="Pre-period visits file (CSV, CSV.gz, Parquet): one row per unit, first-seen time, pre-period columns."),
    orders: Path = typer.Option(None, "--orders", help="Pre-period orders file: unit id and revenue per order."),
    spec_path: Path = typer.Option(None, "--spec", "-s", help="A spec whose column maps ([audit.visits], [readout.orders]) name the files' columns (default names otherwise)."),
    covariate: str = typer.Option(None, "--covariate", help="Visits column to use for CUPED (default: the spec's covariates, best correlated)."),
    orders_unit: str = typer.Option(None, "--orders-unit-column", help="Orders column with the unit id (default unit_id)."),
    orders_revenue: str = typer.Option(None, "--orders-revenue-column", help="Orders column with the revenue (default revenue)."),
    holdout_shares: str = typer.Option("5%,10%,20%,30%,50%", "--holdout-shares", help="Holdout shares to compare, e.g. 5%,10%,20% or 0.05,0.1."),
    weeks: str = typer.Option("2-26", "--weeks", help="Durations in weeks: a range 2-26 or a list 2,4,8."),
    max_weeks: int = typer.Option(12, "--max-weeks", help="The longest test you would run; the advice picks the smallest share that fits."),
    fmt: str = typer.Option("text", "--format", "-f", metavar=f"<{'|'.join(FORMATS)}>", help=f"Output format: {', '.join(FORMATS)}."),
    out: Path = typer.Option(None, "--out", "-o", help="Write the plan to this file instead of stdout."),
    write_spec: str = typer.Option(None, "--write-spec", help="Also write a spec NAME.toml with the recommended holdout share (as `armlock init` does)."),
    spec_out: Path = typer.Option(None, "--spec-out", help="Where --write-spec writes (default NAME.toml here)."),
    force: bool = typer.Option(False, "--force", help="Let --write-spec overwrite an existing file."),
) -> None:
    """Plan a holdout test: the smallest detectable effect for each holdout share and duration, with and
    without CUPED, the iROAS it can tell from zero and from break-even, the revenue the holdout forgoes,
    the weeks the target needs, what reading every week costs, and a one-sentence recommendation.

    Give the shop as numbers, or as pre-period files (--visits and --orders) from which traffic, revenue
    per unit, conversion and rho are estimated; numbers given as options override the estimates.

    Exit codes: 0 ok, 2 usage (an option that is not a number), 4 bad input (a number out of range,
    a file or column missing, --write-spec without a recommendation).

    Example:
      armlock plan --weekly-units 40000 --revenue-mean 7 --revenue-sd 75 --exposure-rate 0.6 \\
          --effect 0.35 --weekly-spend 12000 --margin 0.4 --rho 0.3 --write-spec spring-retargeting
    """
    from armlock.plan.compute import make_plan
    from armlock.plan.model import PlanInputs
    from armlock.plan.render import RENDERERS

    if fmt not in FORMATS:
        raise typer.BadParameter(f"unknown format {fmt!r}; choose one of: {', '.join(FORMATS)}", param_hint="--format")
    shares, week_list = parse_shares(holdout_shares), parse_weeks(weeks)
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
    if visits is not None and orders is not None:
        from armlock.plan.estimate import estimate_pre_period

        pre = estimate_pre_period(visits, orders, _columns(spec_path, covariate, orders_unit, orders_revenue))
        found, estimates, notes = pre.values, pre.estimates, pre.notes
    elif spec_path is not None or covariate or orders_unit or orders_revenue:
        raise InputError("--spec, --covariate and the orders column options only apply with --visits and --orders")
    given = {k: v for k, v in {
        "weekly_units": weekly_units, "revenue_mean": revenue_mean, "revenue_sd": revenue_sd, "rho": rho,
    }.items() if v is not None}
    if given and found:
        notes.append("Given on the command line instead of the estimate: " + ", ".join(
            f"{k.replace('_', ' ')} {v:g}" for k, v in given.items()))
    common = dict(exposure_rate=exposure_rate, effect=effect, lift=lift, target_iroas=target_iroas,
                  weekly_spend=weekly_spend, margin=margin, alpha=alpha, power=power,
                  equal_variance=equal_variance)
    units = given.get("weekly_units", found.get("weekly_units"))
    the_rho = given.get("rho", found.get("rho", 0.0))
    if units is None:
        raise InputError("--weekly-units: how many new units a week would enter the test? (or give --visits and --orders)")
    if conversion is not None or order_value is not None:
        if conversion is None or order_value is None:
            raise InputError("--conversion and --order-value go together")
        if revenue_mean is not None or revenue_sd is not None:
            raise InputError("give revenue per unit as --revenue-mean and --revenue-sd, or as --conversion and "
                             "--order-value, not both")
        inputs = PlanInputs.from_conversion(conversion=conversion, order_value=order_value,
                                            order_value_sd=order_value_sd or 0.0, weekly_units=units, rho=the_rho, **common)
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
    plan = make_plan(inputs, shares=shares, weeks=week_list, max_weeks=max_weeks, estimates=estimates, notes=notes)
    if write_spec is not None and plan.recommendation.share is None:
        raise InputError(f"--write-spec: no spec written, because there is no recommended share "
                         f"({plan.recommendation.status}): {plan.recommendation.sentence}")
    if fmt == "html":
        from armlock.plan.report_html import render_html

        text = render_html(plan)
    else:
        text = RENDERERS[fmt](plan)
    emit(text, out, what="the plan", done=f"Wrote {out} ({fmt}). {plan.recommendation.sentence}")
    if write_spec is not None:
        from .cmd_spec import write_new_spec

        assert plan.recommendation.share is not None
        target, spec = write_new_spec(write_spec, holdout_share=plan.recommendation.share, out=spec_out, force=force)
        weeks_planned = plan.recommendation.weeks or 0
        text = target.read_text(encoding="utf-8")
        carried = carry_plan_into_spec_text(text, planned_units=int(round(inputs.weekly_units * weeks_planned)),
                                            margin=inputs.margin, alpha=inputs.alpha, power=inputs.power)
        if carried != text:  # the readout reads the test as planned: its anytime interval is tightest there
            from armlock.assign import load_spec

            target.write_text(carried, encoding="utf-8")
            spec = load_spec(target)
        split = ", ".join(f"{a.name} {a.weight / 100:g}%" for a in spec.arms)
        err(f"Wrote {target}  (arms: {split}; fingerprint {spec.fingerprint}); plan to run it "
            f"{plan.recommendation.weeks} weeks. Once the test starts, never change salt or weights.")


def register(app: typer.Typer) -> None:
    app.command("plan")(plan_cmd)
