"""`armlock plan`: before the test, how big a holdout, for how long, and what it costs."""

from __future__ import annotations

import functools
import math
import os
from pathlib import Path
from typing import Any

import typer

from armlock.assign import InputError, SpecError

from armlock.shared.files import in_place

from .common import emit, err
from .options import format_option

FORMATS = ("text", "markdown", "json", "html")


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


def _columns(spec_path: Path | None, covariate: str | None, orders_unit: str | None, orders_revenue: str | None,
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
                         functools.partial(lambda v, m: put(m, v), value), section, count=1)
    return text[:start] + section + text[end:]


def write_spec_atomically(name: str, share: float, dest: Path, *, force: bool, carry: dict[str, Any]) -> Any:
    """Render the spec (as `armlock init` does, fresh salt), carry the plan into its `[readout]` table, validate
    it from a temporary file in the destination's folder and only then rename it into place: an invalid spec
    is never left on disk."""
    import tempfile

    from armlock.assign import load_spec
    from armlock.assign.init import render_spec_toml
    from armlock.assign.spec import share_to_basis_points

    if dest.is_dir():
        raise SpecError(f"--spec-out {dest}: is a folder; give the spec's file name, e.g. {dest / (name + '.toml')}")
    if dest.exists() and not force:
        raise SpecError(f"{dest}: already exists; choose another --spec-out or pass --force")
    if in_place(dest):  # a device or pipe: a rename would replace it
        raise SpecError(f"{dest}: not a regular file; give a .toml file name for the spec")
    try:
        h = share_to_basis_points(share)
    except ValueError as exc:
        raise SpecError(f"--write-spec: {exc}") from None
    text = carry_plan_into_spec_text(render_spec_toml(name, [("holdout", h), ("exposed", 10_000 - h)]), **carry)
    folder = dest.parent if str(dest.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise SpecError(f"{dest}: cannot write: {exc.strerror}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        spec = load_spec(tmp)  # the spec as written must validate, or nothing is left behind
        os.replace(tmp, dest)
    except OSError as exc:
        raise SpecError(f"{dest}: cannot write: {exc.strerror}") from None
    except SpecError as exc:
        raise SpecError(f"--write-spec: no spec written, because it would not validate: {exc}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return spec


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
    from armlock.plan.compute import make_plan
    from armlock.plan.model import PlanInputs
    from armlock.plan.render import RENDERERS

    reach = parse_fraction(exposure_rate, "--exposure-rate")
    the_lift = parse_fraction(lift, "--lift", lift=True)
    the_margin = parse_fraction(margin, "--margin")
    the_alpha = parse_fraction(alpha, "--alpha")
    the_power = parse_fraction(power, "--power")
    the_conversion = parse_fraction(conversion, "--conversion")
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
    file_options = {"--spec": spec_path, "--covariate": covariate, "--visits-unit-column": visits_unit,
                    "--visits-time-column": visits_time, "--orders-unit-column": orders_unit,
                    "--orders-revenue-column": orders_revenue}
    if visits is not None and orders is not None:
        from armlock.plan.estimate import estimate_pre_period

        cols = _columns(spec_path, covariate, orders_unit, orders_revenue, visits_unit, visits_time)
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
    common = dict(exposure_rate=1.0 if reach is None else reach, effect=effect, lift=the_lift,
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
        assert plan.recommendation.share is not None
        weeks_planned = plan.recommendation.weeks or 0
        spec = write_spec_atomically(write_spec, plan.recommendation.share, dest, force=force, carry=dict(
            planned_units=int(round(inputs.weekly_units * weeks_planned)), margin=inputs.margin,
            alpha=inputs.alpha, power=inputs.power))
    if fmt == "html":
        from armlock.plan.report_html import render_html

        text = render_html(plan)
    elif fmt == "text":
        from armlock.plan.render import render_text

        text = render_text(plan, full=full)
    else:
        text = RENDERERS[fmt](plan)
    emit(text, out, what="the plan", done=f"Wrote {out} ({fmt}). {plan.recommendation.sentence}")
    if spec is not None:
        split = ", ".join(f"{a.name} {a.weight / 100:g}%" for a in spec.arms)
        err(f"Wrote {dest}  (arms: {split}; fingerprint {spec.fingerprint}); plan to run it "
            f"{plan.recommendation.weeks} weeks. Once the test starts, never change salt or weights.")


def register(app: typer.Typer) -> None:
    app.command("plan")(plan_cmd)
