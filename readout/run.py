"""The library entry point: `run_readout(spec, visits=..., orders=..., ...)` -> ReadoutReport.

Same layering as the audit (read -> engine -> tables -> statistics -> verdict -> report). The
audit's checks run on the same inputs and gate the readout: visits and exposures are read once
and serve both.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date
from pathlib import Path

from armlock.assign import InputError, Spec
from armlock.audit import engine_pandas as audit_engine
from armlock.audit.load import load_exposures, load_identities, load_visits
from armlock.audit.read import Frames
from armlock.audit.model import AuditReport
from armlock.audit.run import checks_from_tables, input_bytes, report_from_checks

from . import engine_pandas
from .analyze import analyze
from .load import attach_covariates, load_orders, load_spend
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
) -> ReadoutReport:
    """Read out a test as of the end of `as_of`; see `run_readout_and_audit`."""
    return run_readout_and_audit(spec, visits=visits, orders=orders, exposures=exposures, identities=identities,
                                 spend=spend, spend_file=spend_file, attributed_revenue=attributed_revenue,
                                 as_of=as_of, advance=advance, split_changes=split_changes)[0]


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
) -> tuple[ReadoutReport, AuditReport]:
    """Read out a test as of the end of `as_of` (UTC; default: the last first-seen day).

    `spend` (one amount for the exposed arms) or `spend_file` (per campaign and day, columns in
    `[readout.spend]`); `attributed_revenue` overrides the orders' attributed column. Raises
    `assign.InputError` for unusable files (file, column and rows named). Also returns the audit
    of the same inputs (the gate), as `run_audit` would report it; `split_changes` as in `run_audit`.
    """
    if spend is not None and spend_file is not None:
        raise InputError("give either --spend or --spend-file, not both")
    if spend is not None and spend < 0:
        raise InputError(f"--spend must not be negative, got {spend}")
    step = advance or (lambda n: None)
    fr = Frames(visits=None)  # type: ignore[arg-type]
    used = load_visits(spec, visits, as_of, fr)
    attach_covariates(spec, visits, fr.visits, fr.notes)
    step(input_bytes(visits))
    if exposures is not None:
        load_exposures(spec, exposures, used, fr)
        step(input_bytes(exposures))
    if identities is not None:
        load_identities(spec, identities, used, fr)
        step(input_bytes(identities))
    audit_tables = audit_engine.compute(spec, fr)
    checks = checks_from_tables(spec, audit_tables, fr.counts, split_changes or [])
    audit = report_from_checks(spec, fr, used, checks)
    counts: dict[str, float] = {}
    order_frame = load_orders(spec, orders, used, fr.notes, counts)
    step(input_bytes(orders))
    if spend_file is not None:
        spend = load_spend(spec, spend_file, used, fr.notes)
    tables = engine_pandas.compute(spec, fr, audit_tables, order_frame, used, counts, fr.notes)
    attributed = attributed_revenue if attributed_revenue is not None else tables.attributed
    report = analyze(spec, tables, as_of=used.isoformat(), checks=checks, spend=spend, attributed=attributed,
                     notes=fr.notes, has_exposures=exposures is not None)
    return report, audit
