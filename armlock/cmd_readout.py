"""`armlock readout`: did the channel cause sales, and did it pay? The audit gates it; its verdict sets the exit code."""

from __future__ import annotations

from pathlib import Path

import typer

from armlock.readout.render import FORMATS

from .cmd_audit import concurrent_specs, finish
from .common import emit, open_spec_and_lock, progress
from .options import (
    ACCEPT_CHANGED_SPLIT,
    ENGINE,
    MEMORY_LIMIT,
    REPORT_OUT,
    SPARK_CONF,
    SPARK_MASTER,
    SPEC,
    TEMP_DIR,
    VISITS,
    as_of_day,
    engine_settings,
    format_option,
)



def readout_cmd(
    spec_path: Path = SPEC,
    visits: str = VISITS,
    orders: str = typer.Option(..., "--orders", help="Orders log from the shop's back end: one row per order, refunds as negative revenue (columns: [readout.orders]; a path or, with --engine spark, table:db.name)."),
    exposures: str = typer.Option(None, "--exposures", help="The ad vendor's exposure log: enables the leakage check and the effect per exposed unit."),
    identities: str = typer.Option(None, "--identities", help="Identity links: unit id -> customer key; needed when orders carry a customer key."),
    spend: float = typer.Option(None, "--spend", help="What the channel cost over the test, one amount for the exposed arm(s), in the spec's currency."),
    spend_file: Path = typer.Option(None, "--spend-file", help="Spend per campaign and day (columns: [readout.spend]; a local file, read on this machine); days outside the test are left out."),
    attributed: float = typer.Option(None, "--attributed-revenue", help="Revenue the attribution report credited to the channel over the test (overrides the orders' attributed column)."),
    as_of: str = typer.Option(None, "--as-of", help="Read out as of the end of this UTC day (YYYY-MM-DD). Default: the last first-seen day."),
    fmt: str = format_option(FORMATS, help=f"Report format: {', '.join(FORMATS)} (finance: one printable HTML page for the finance lead)."),
    out: Path = REPORT_OUT,
    strict: bool = typer.Option(False, "--strict", help="Exit 1 when the audit gate warns (default: 0)."),
    record: bool = typer.Option(False, "--record", help="Keep this readout's figures in the history file, so `armlock history` shows the estimate week by week."),
    history_path: str = typer.Option(None, "--history", help="The history file for --record (default: beside the spec, SPEC.history.sqlite), or a PostgreSQL URL postgresql://USER@HOST/DB that every runner shares (needs pip install 'armlock[postgres]')."),
    alongside: list[Path] = typer.Option(None, "--alongside", metavar="SPEC|FOLDER", help="A concurrent holdout test's spec (or a folder of specs; repeatable): adds the 2x2 readout of the two tests on their shared units, each channel's effect on revenue per unit and their interaction (embedded engines)."),
    accept: bool = ACCEPT_CHANGED_SPLIT,
    engine: str = ENGINE,
    spark_master: str = SPARK_MASTER,
    spark_conf: list[str] = SPARK_CONF,
    memory_limit: str = MEMORY_LIMIT,
    temp_dir: str = TEMP_DIR,
) -> None:
    """Read out the test: incremental revenue, profit, iROAS and ROI with honest intervals, the
    effect per exposed unit, and what attribution credited, arm against arm (intent to treat).

    The audit's checks run on the same files first: when the split fails, the readout still
    computes, but its headline says the estimate is not trustworthy and why, and it exits 3.
    Intervals: the fixed-horizon one is valid for one planned look; reading weekly, use the
    anytime interval beside it. Column names come from the spec's [readout] tables.

    Exit codes: 0 PASS (or WARN without --strict), 1 WARN with --strict, 3 the audit gate is FAIL,
    4 bad input (a file, column or row is wrong: nothing was judged), 5 internal error, 6 the spec's
    split changed since its lock was recorded (confirm with --accept-changed-split), 7 the data is
    stale (only a feed-freshness check of the gate fails). The last line on stderr is a one-line
    summary for a scheduler's log.

    Example:
      armlock readout --spec spring.toml --visits visits.parquet --orders orders.csv \\
          --exposures exposures.parquet --spend 42000 --format html --out readout.html
      armlock readout --spec spring.toml --engine spark --visits table:analytics.visits \\
          --orders table:shop.orders --exposures s3a://logs/exposures/ --spend 42000 --format json
    """
    if spend is not None and spend_file is not None:
        raise typer.BadParameter("give either --spend or --spend-file, not both", param_hint="--spend")
    if spend is not None and spend < 0:
        raise typer.BadParameter(f"spend must not be negative, got {spend:g}", param_hint="--spend")
    day = as_of_day(as_of)
    engine_choice = engine_settings(engine, spark_master, spark_conf, memory_limit, temp_dir)
    spec, lock = open_spec_and_lock(spec_path, accept_changed_split=accept)
    from armlock.assign.lock import changes_after_start
    from armlock.audit.run import input_bytes  # pandas/scipy load only when a readout runs
    from armlock.readout.run import run_readout

    eng = engine_choice.select()
    total = input_bytes(visits, exposures, identities, orders) or None
    with progress(total, "reading logs") as advance:
        report = run_readout(spec, visits=visits, orders=orders, exposures=exposures, identities=identities,
                             spend=spend, spend_file=spend_file, attributed_revenue=attributed, as_of=day,
                             advance=advance, split_changes=changes_after_start(lock), engine=eng,
                             alongside=[s for _, s in concurrent_specs(spec_path, alongside or [])])
    from armlock.shared import history

    hist = history.target(history_path) if history_path else history.default_history_path(spec_path)
    if record:
        history.record_readout(hist, fingerprint=report.fingerprint, as_of=report.as_of,
                               experiment=report.experiment, status=report.status,
                               figures={k: f.model_dump() for k, f in report.figures.items()})
    from armlock.readout.render import render_as

    text = render_as(report, fmt)
    emit(text, out, what="the report", done=f"Wrote the {fmt} readout to {out}: {report.headline}")
    finish("readout", report.experiment, report.as_of, report.status,
           [(c.id, c.status) for c in report.gate], strict)


def register(app: typer.Typer) -> None:
    app.command("readout")(readout_cmd)
