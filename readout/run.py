"""The library entry point: `run_readout(spec, visits=..., orders=..., ...)` -> ReadoutReport.

Same layering as the audit (read -> engine -> tables -> statistics -> verdict -> report). The
audit's checks run on the same inputs and gate the readout: visits and exposures are read once
and serve both.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from datetime import date, timedelta
from pathlib import Path

from armlock.assign import InputError, Spec
from armlock.shared.engine import Engine, Inputs, ReadoutResult, canonical, select_engine
from armlock.shared.lazy import warm_up_stats
from armlock.shared.load import check_as_of
from armlock.audit import AuditReport, checks_from_tables, report_from_checks

from .analyze import analyze
from armlock.shared.load_readout import load_spend_days
from .money import window_spend
from .orders import check_orders, check_spend
from armlock.shared.readout_tables import COV_PREFIX, ReadoutTables
from .model import ReadoutReport

PathLike = str | Path


def run_readout(
    spec: Spec,
    *,
    visits: PathLike,
    orders: PathLike,
    exposures: PathLike | None = None,
    identities: PathLike | None = None,
    spend: float | None = None,
    spend_file: PathLike | None = None,
    attributed_revenue: float | None = None,
    as_of: date | None = None,
    advance: Callable[[int], None] | None = None,
    split_changes: list[str] | None = None,
    engine: Engine | str = "duckdb",
    alongside: Sequence[Spec] = (),
) -> ReadoutReport:
    """Read out a test as of the end of `as_of`; see `run_readout_and_audit`."""
    return run_readout_and_audit(spec, visits=visits, orders=orders, exposures=exposures, identities=identities,
                                 spend=spend, spend_file=spend_file, attributed_revenue=attributed_revenue,
                                 as_of=as_of, advance=advance, split_changes=split_changes, engine=engine,
                                 alongside=alongside)[0]


def run_readout_and_audit(
    spec: Spec,
    *,
    visits: PathLike,
    orders: PathLike,
    exposures: PathLike | None = None,
    identities: PathLike | None = None,
    spend: float | None = None,
    spend_file: PathLike | None = None,
    attributed_revenue: float | None = None,
    as_of: date | None = None,
    advance: Callable[[int], None] | None = None,
    split_changes: list[str] | None = None,
    engine: Engine | str = "duckdb",
    alongside: Sequence[Spec] = (),
) -> tuple[ReadoutReport, AuditReport]:
    """Read out a test as of the end of `as_of` (UTC; default: the last first-seen day).

    `spend` (one amount for the exposed arms) or `spend_file` (per campaign and day, columns in
    `[readout.spend]`, a local file); `attributed_revenue` overrides the orders' attributed column.
    Raises `assign.InputError` for unusable files (file, column and rows named). Also returns the
    audit of the same inputs (the gate), as `run_audit` would report it; `split_changes` as in
    `run_audit`. `engine` is "duckdb" (the default), "pandas", "spark" or an `audit.engine.Engine` (as in `run_audit`):
    it computes both the audit's and the readout's tables; the statistics here read only those.
    """
    if spend is not None and spend_file is not None:
        raise InputError("give either --spend or --spend-file, not both")
    if spend is not None and not (math.isfinite(spend) and spend >= 0):
        raise InputError(f"--spend must be a finite amount of zero or more, got {spend}")
    if attributed_revenue is not None and not math.isfinite(attributed_revenue):
        raise InputError(f"--attributed-revenue must be a finite amount, got {attributed_revenue}")
    check_as_of(as_of)
    warm_up_stats()
    eng = select_engine(engine) if isinstance(engine, str) else engine
    res = eng.readout(spec, Inputs(visits, exposures, identities, orders), as_of, advance or (lambda n: None))
    report, audit = reports_from_result(spec, res, spend=spend, spend_file=spend_file,
                                        attributed_revenue=attributed_revenue, split_changes=split_changes,
                                        has_exposures=exposures is not None)
    if alongside:  # the 2x2 readout with each concurrent test (`alongside`: their specs)
        from .factorial import concurrent_readout
        from .model import TwoHoldouts

        report.two_holdouts = [TwoHoldouts(**concurrent_readout(spec, s, res.tables.units)) for s in alongside]
    return report, audit


def _plan_end(spec: Spec) -> date:
    """The last day of the planned test (its `end`), or a far date when the spec names none."""
    if spec.end is None:
        return date.max
    end = spec.end
    return (end - timedelta(microseconds=1)).date() if end.time() == end.min.time() else end.date()


def _readout_note(note: str, as_of: object) -> str:
    """The audit's "covers data through" note, said for the readout: visits end earlier, but
    orders are counted through the as-of day."""
    tail = "the report covers data through "
    if tail not in note:
        return note
    last = note.rsplit(tail, 1)[1].removesuffix(" only")
    return (note.rsplit(tail, 1)[0] + f"no unit first seen after {last} is in the test, and orders are counted "
            f"through the end of {as_of}")


def reports_from_result(spec: Spec, res: ReadoutResult, *, spend: float | None = None,
                        spend_file: PathLike | None = None, attributed_revenue: float | None = None,
                        split_changes: list[str] | None = None,
                        has_exposures: bool = True) -> tuple[ReadoutReport, AuditReport]:
    """The readout and its audit from an engine's `ReadoutResult`: statistics on the tables only."""
    used = res.audit.as_of
    checks = checks_from_tables(spec, canonical(res.audit.tables), res.audit.counts, split_changes or [],
                                as_of=used)
    audit = report_from_checks(spec, res.audit, used, checks)
    _finite_moments(res.tables)
    # the readout's gate: the audit's checks and the orders feed (rows used, match, coverage, freshness)
    gate = [*checks, check_orders(spec, res.tables, used)]
    notes = [_readout_note(n, used) for n in res.audit.notes] + list(res.notes)
    window = spec.readout.window
    if spend_file is not None or (spend is not None and window != "to_as_of"):
        if spend_file is not None:
            by_day = load_spend_days(spec, spend_file, used, notes)
            gate.append(check_spend(spec, by_day, used))  # the spend feed: does it reach the as-of date?
        else:  # one amount: taken as spent evenly over the test's days to the as-of
            first = spec.start.date()
            n_days = max((used - first).days + 1, 1)
            by_day = {first + timedelta(days=i): float(spend) / n_days for i in range(n_days)}  # type: ignore[arg-type]
        spend = float(sum(by_day.values()))
        if window != "to_as_of":
            daily = res.audit.tables.split.daily
            exposed = [a for a in spec.exposed_arms if a in daily.columns]
            new = {date.fromisoformat(str(d)): int(n) for d, n in daily[exposed].sum(axis=1).items()}
            kept = window_spend(by_day, new, int(window), used)
            notes.append(f"spend: {kept:,.2f} of {spend:,.2f} belongs to the units and days a {window}-day window "
                         f"measures (each day's spend shared among the exposed units seen so far"
                         f"{'' if spend_file is not None else '; --spend taken as spent evenly over the days'}); "
                         "iROAS, ROI and cost per buyer use it")
            spend = kept
    if spend_file is None and spend is not None and used < _plan_end(spec):
        notes.append(f"--spend {spend:,.2f} is taken as the channel's cost from the start to the as-of {used}; "
                     "to read weekly, give --spend-file (spend per day) so spend and revenue cover the same days")
    attributed = attributed_revenue if attributed_revenue is not None else res.tables.attributed
    report = analyze(spec, res.tables, as_of=used.isoformat(), checks=gate, spend=spend, attributed=attributed,
                     notes=notes, has_exposures=has_exposures)
    return report, audit


def _finite_moments(tables: ReadoutTables) -> None:
    """Refuse covariates whose sums overflow a float (values near 1e308): no estimate can use them."""
    for arm, m in tables.final.items():
        for i, name in enumerate(m.names):
            if not (math.isfinite(float(m.means[i])) and math.isfinite(float(m.m2[i, i]))):
                what = (f"covariate '{name.removeprefix(COV_PREFIX)}' of the visits" if name.startswith(COV_PREFIX)
                        else f"the orders' {name}")
                raise InputError(f"{what} has values too large to sum in arm {arm} (near 1e308): "
                                 "fix the column or leave it out of [readout] covariates")
