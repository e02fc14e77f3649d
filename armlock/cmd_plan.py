"""`armlock plan`: before the test, how big a holdout, for how long, and what it costs."""

from __future__ import annotations

import math
from pathlib import Path

import typer

from armlock.assign import InputError


from armlock.plan.render import FORMATS

from .common import emit, err
from .options import format_option



def _number(part: str, flag: str) -> float:
    try:
        v = float(part)
    except ValueError:
        raise typer.BadParameter(f"{part!r} is not a number", param_hint=flag) from None
    if not math.isfinite(v):
        raise InputError(f"{flag}: must be a finite number, got {part}")
    return v


def parse_fraction(text: str | None, flag: str, *, lift: bool = False) -> float | None:
    """'8%' -> 0.08, '0.08' -> 0.08. A bare number above 1 is refused with the fix ('did you mean 8%?'):
    a share cannot exceed 1, and a lift of +800% is almost always a percent typed without its sign."""
    if text is None:
        return None
    t = text.strip()
    v = _number(t[:-1].strip(), flag) / 100 if t.endswith("%") else _number(t, flag)
    if v <= 0:
        raise InputError(f"{flag}: must be positive, got {t}")
    if t.endswith("%"):
        return v
    if v > 1:
        if lift:
            raise InputError(f"{flag}: {t} would mean +{v * 100:,.6g}%; did you mean {t}%? Write {t}% or "
                             f"{v / 100:g} (or {v * 100:,.6g}% if you really mean it)")
        raise InputError(f"{flag}: {t} is not a share between 0 and 1; did you mean {t}%? Write {t}% or {v / 100:g}")
    return v


def parse_shares(text: str) -> list[float]:
    """'5%,10%,0.2' -> [0.05, 0.1, 0.2]; a bare number must be a share in (0, 1)."""
    out = []
    for part in filter(None, (p.strip() for p in text.split(","))):
        try:
            v = float(part[:-1]) / 100 if part.endswith("%") else float(part)
        except ValueError:
            raise InputError(f"--holdout-shares: {part!r} is not a share; write 0.05 or 5%") from None
        if not 0 < v < 1:
            hint = f"; did you mean {part}%?" if not part.endswith("%") and 1 < v < 100 else ""
            raise InputError(f"--holdout-shares: {part} is outside (0, 1){hint}; write 0.05 or 5%")
        out.append(round(v, 10))
    if not out:
        raise InputError("--holdout-shares: give at least one share, e.g. 5%,10%,20%")
    return out


def parse_weeks(text: str) -> list[int]:
    """'2-26' or '2,4,8,12' (or both, comma-separated) -> whole weeks, each from 1 to MAX_WEEKS."""
    from armlock.plan.compute import MAX_WEEKS

    out: set[int] = set()
    for part in filter(None, (p.strip() for p in text.split(","))):
        lo, dash, hi = part.partition("-")
        try:
            ends = (int(lo), int(hi)) if dash else (int(part), int(part))
        except ValueError:
            raise InputError(f"--weeks: {part!r} is not a whole number of weeks or a range like 2-26") from None
        if dash and ends[1] < ends[0]:
            raise InputError(f"--weeks: {part!r} runs from high to low; write it as {hi.strip()}-{lo.strip()}")
        if ends[0] < 1:
            raise InputError(f"--weeks: {part!r} must give whole weeks of at least 1")
        if ends[1] > MAX_WEEKS:
            raise InputError(f"--weeks: {part!r} goes beyond {MAX_WEEKS} weeks (10 years), the longest a plan "
                             "considers")
        out.update(range(ends[0], ends[1] + 1))
    if not out:
        raise InputError("--weeks: give at least one duration, e.g. 2-26")
    return sorted(out)


def plan_cmd(
    weekly_units: float = typer.Option(None, "--weekly-units", help="New units (visitors) a week who would enter the test."),
    revenue_mean: float = typer.Option(None, "--revenue-mean", help="Revenue per unit over the test, mean (units without orders count 0)."),
    revenue_sd: float = typer.Option(None, "--revenue-sd", help="Revenue per unit, standard deviation (often 5-20 times the mean)."),
    conversion: str = typer.Option(None, "--conversion", help="Instead of mean and SD: the share of units that order, e.g. 2% or 0.02."),
    order_value: float = typer.Option(None, "--order-value", help="With --conversion: average order value."),
    order_value_sd: float = typer.Option(None, "--order-value-sd", help="With --conversion: SD of order values (default 0, which understates the spread)."),
    exposure_rate: str = typer.Option(None, "--exposure-rate", help="Share of the exposed arm the vendor actually reaches, e.g. 60% (default 100%, full reach); dilutes the effect."),
    effect: float = typer.Option(None, "--effect", help="Target: extra revenue per reached unit (in currency)."),
    lift: str = typer.Option(None, "--lift", help="Target: relative lift per reached unit, e.g. 5% or 0.05."),
    target_iroas: float = typer.Option(None, "--target-iroas", help="Target: incremental revenue per unit of spend (needs --weekly-spend)."),
    weekly_spend: float = typer.Option(None, "--weekly-spend", help="The channel's weekly spend during the test (all of it on the exposed arm; the readout divides by the whole spend)."),
    margin: str = typer.Option(None, "--margin", help="Gross margin as a share of revenue, e.g. 40% (break-even iROAS = 1 / margin)."),
    alpha: str = typer.Option("5%", "--alpha", help="Two-sided significance level, below 50%."),
    power: str = typer.Option("80%", "--power", help="Power to plan for, at least 50%."),
    equal_variance: bool = typer.Option(False, "--equal-variance", help="Plan with the textbook formula (both arms keep the same SD under the effect) instead of letting the exposed arm's variance grow with the effect."),
    rho: float = typer.Option(None, "--rho", help="Correlation of revenue with the readout's pre-period covariate, for CUPED (default 0, or estimated from --visits)."),
    visits: Path = typer.Option(None, "--visits", help="Pre-period visits file (CSV, CSV.gz, Parquet): one row per unit, first-seen time, pre-period columns."),
    orders: Path = typer.Option(None, "--orders", help="Pre-period orders file: unit id and revenue per order."),
    spec_path: Path = typer.Option(None, "--spec", "-s", help="A spec whose column maps ([audit.visits], [readout.orders]) and [readout] covariates name the files' columns (default names otherwise)."),
    covariate: str = typer.Option(None, "--covariate", help="Visits column(s) the readout will use for CUPED, comma-separated (default: the spec's [readout] covariates, else pre_revenue)."),
    visits_unit: str = typer.Option(None, "--visits-unit-column", help="Visits column with the unit id (default unit_id)."),
    visits_time: str = typer.Option(None, "--visits-time-column", help="Visits column with the first-seen time (default first_seen)."),
    orders_unit: str = typer.Option(None, "--orders-unit-column", help="Orders column with the unit id (default unit_id)."),
    orders_revenue: str = typer.Option(None, "--orders-revenue-column", help="Orders column with the revenue (default revenue)."),
    holdout_shares: str = typer.Option("5%,10%,20%,30%,50%", "--holdout-shares", help="Holdout shares to compare, e.g. 5%,10%,20% or 0.05,0.1."),
    weeks: str = typer.Option("2-26", "--weeks", help="Durations in weeks: a range 2-26 or a list 2,4,8 (at most 520)."),
    max_weeks: int = typer.Option(12, "--max-weeks", help="The longest test you would run."),
    prefer: str = typer.Option("balanced", "--prefer", metavar="<balanced|money|time>", help="How to weigh weeks against revenue forgone: balanced (the fastest design forgoing at most 25% more than the cheapest), money (least revenue forgone), time (fewest weeks)."),
    against: str = typer.Option("zero", "--against", metavar="<zero|break-even>", help="What the test must tell the target from: zero (does the channel add revenue?) or break-even (does it pay? needs --weekly-spend and --margin)."),
    currency: str = typer.Option(None, "--currency", help="Currency code shown beside amounts, e.g. USD (default: the spec's [readout] currency with --spec, else none)."),
    full: bool = typer.Option(False, "--full", help="Text output: add every share x weeks grid and the assumptions (the default is the recommendation and one table)."),
    fmt: str = format_option(FORMATS, help=f"Output format: {', '.join(FORMATS)}."),
    out: Path = typer.Option(None, "--out", "-o", help="Write the plan to this file instead of stdout."),
    write_spec: str = typer.Option(None, "--write-spec", help="Also write a spec NAME.toml with the recommended holdout share (as `armlock init` does)."),
    spec_out: Path = typer.Option(None, "--spec-out", help="Where --write-spec writes (default NAME.toml here)."),
    force: bool = typer.Option(False, "--force", help="Let --write-spec overwrite an existing file."),
) -> None:
    """Plan a holdout test: the smallest detectable effect for each holdout share and duration, with and
    without CUPED, the iROAS it can tell from zero and from break-even, the revenue the holdout forgoes,
    the weeks the target needs, what reading every week costs, and a one-sentence recommendation.

    Give the shop as numbers, or as pre-period files (--visits and --orders) from which traffic, revenue
    per unit, conversion and rho are estimated; numbers given as options override the estimates. Shares
    and levels take a percent (8%) or a fraction (0.08); a bare number above 1 is refused.

    Exit codes: 0 ok, 2 usage (an option that is not a number), 4 bad input (a number out of range,
    a file or column missing, --write-spec without a recommendation).

    Example:
      armlock plan --weekly-units 40000 --revenue-mean 7 --revenue-sd 75 --exposure-rate 60% \\
          --effect 0.35 --weekly-spend 12000 --margin 40% --rho 0.3 --write-spec spring-retargeting
    """
    from armlock.plan.render import render_as
    from armlock.plan.request import PlanRequest, plan_for

    reach = parse_fraction(exposure_rate, "--exposure-rate")
    the_lift = parse_fraction(lift, "--lift", lift=True)
    the_margin = parse_fraction(margin, "--margin")
    the_alpha = parse_fraction(alpha, "--alpha")
    the_power = parse_fraction(power, "--power")
    the_conversion = parse_fraction(conversion, "--conversion")
    shares, week_list = parse_shares(holdout_shares), parse_weeks(weeks)
    outcome = plan_for(PlanRequest(
        weekly_units=weekly_units, revenue_mean=revenue_mean, revenue_sd=revenue_sd, conversion=the_conversion,
        order_value=order_value, order_value_sd=order_value_sd, exposure_rate=reach, effect=effect, lift=the_lift,
        target_iroas=target_iroas, weekly_spend=weekly_spend, margin=the_margin, alpha=the_alpha, power=the_power,
        equal_variance=equal_variance, rho=rho, visits=visits, orders=orders, spec_path=spec_path, covariate=covariate,
        visits_unit=visits_unit, visits_time=visits_time, orders_unit=orders_unit, orders_revenue=orders_revenue,
        shares=shares, weeks=week_list, max_weeks=max_weeks, prefer=prefer, against=against, currency=currency,
        write_spec=write_spec, spec_out=spec_out, force=force))
    plan, spec, dest = outcome.plan, outcome.spec, outcome.spec_path
    text = render_as(plan, fmt, full=full)
    emit(text, out, what="the plan", done=f"Wrote {out} ({fmt}). {plan.recommendation.sentence}")
    if spec is not None:
        split = ", ".join(f"{a.name} {a.weight / 100:g}%" for a in spec.arms)
        err(f"Wrote {dest}  (arms: {split}; fingerprint {spec.fingerprint}); plan to run it "
            f"{plan.recommendation.weeks} weeks. Once the test starts, never change salt or weights.")


def register(app: typer.Typer) -> None:
    app.command("plan")(plan_cmd)
