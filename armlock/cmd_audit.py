"""`armlock audit`: the weekly split-health audit of a running test; the verdict becomes the exit code."""

from __future__ import annotations

from pathlib import Path

import typer

from armlock.assign import Spec
from armlock.audit.model import AuditReport
from armlock.audit.render import FORMATS, render_as
from armlock.shared.words import status_word

from .common import emit, err, open_spec_and_lock, progress
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

def finish(command: str, experiment: str, as_of: str, verdict: str, checks: list[tuple[str, str]],
           strict: bool) -> None:
    """The scheduler's summary line on stderr, then the exit code routed from the checks."""
    from .routing import route, summary_line

    code = route(verdict, checks, strict)
    err(summary_line(command, experiment, as_of, verdict, checks, code))
    if code:
        raise typer.Exit(code)


def _previous_run(hist: Path | str, report: AuditReport) -> dict | None | bool:
    """The run an alert compares with (None: no earlier run); False, with a note, when the history
    cannot be read (then no alert is judged, rather than a wrong one sent)."""
    from armlock.assign import ArmlockError
    from armlock.audit.alerts import previous_run
    from armlock.shared.history import load

    try:
        return previous_run(load(hist, report.fingerprint), report.as_of)
    except ArmlockError as exc:
        err(f"No alert judged: {exc}")
        return False


def send_alert(url: str, spec: Spec, report: AuditReport, previous: dict | None, link: str | None) -> None:
    """Post the alert when this run is news; a note on stderr either way. Never raises, never exits."""
    from armlock.audit.alerts import alert_message, alert_payload, alert_reasons

    from .alert_post import post, where

    reasons = alert_reasons(spec, report, previous)
    if not reasons:
        err(f"No alert sent to {where(url)}: nothing got worse since the previous recorded run.")
        return
    message = alert_message(report, reasons, previous, link)
    ok, what = post(url, alert_payload(report, reasons, message, link))
    err(f"Alert sent to {what}." if ok else f"Alert NOT delivered ({what}); the audit's result stands.")


def concurrent_specs(spec_path: Path, given: list[Path]) -> list[tuple[str, Spec]]:
    """The specs named by --alongside (`assign.portfolio.alongside_specs`), its notes on stderr."""
    from armlock.assign.portfolio import alongside_specs

    notes: list[str] = []
    found = alongside_specs(spec_path, given, notes)
    for note in notes:
        err(note)
    return found


def audit_cmd(
    spec_path: Path = SPEC,
    visits: str = VISITS,
    exposures: str = typer.Option(None, "--exposures", help="The ad vendor's exposure log (impressions, clicks); enables the leakage check."),
    identities: str = typer.Option(None, "--identities", help="Identity links: unit id -> logged-in customer key; enables the churn check."),
    as_of: str = typer.Option(None, "--as-of", help="Audit as of the end of this UTC day (YYYY-MM-DD); later rows are ignored. Default: the last first-seen day."),
    fmt: str = format_option(FORMATS, help="Report format: text for a terminal, markdown for a ticket, json (schema armlock.audit/1) for machines, html for a self-contained page."),
    out: Path = REPORT_OUT,
    strict: bool = typer.Option(False, "--strict", help="Exit 1 when the verdict is WARN (default: 0)."),
    record: bool = typer.Option(False, "--record", help="Keep this run's figures in the history file (one row per as-of date; a rerun replaces it)."),
    history_path: str = typer.Option(None, "--history", help="The history file for --record and --format html (default: beside the spec, SPEC.history.sqlite), or a PostgreSQL URL postgresql://USER@HOST/DB that every runner shares (needs pip install 'armlock[postgres]')."),
    alongside: list[Path] = typer.Option(None, "--alongside", metavar="SPEC|FOLDER", help="A concurrent test's spec file, or a folder of specs (every other spec in it; repeatable): adds the check that the two splits are independent on their shared units (a copied salt fails it)."),
    alert: str = typer.Option(None, "--alert", metavar="URL", help="A webhook (chat or e-mail relay) to post a short message to (JSON, its text at most 500 characters) when the verdict got worse since the previous recorded run, a feed went stale, or the test reached its planned end; never for an unchanged PASS. A webhook that is down never changes the result."),
    alert_link: str = typer.Option(None, "--alert-link", metavar="URL", help="The link the alert ends with, e.g. where the report is published (default: the --out file)."),
    accept: bool = ACCEPT_CHANGED_SPLIT,
    engine: str = ENGINE,
    spark_master: str = SPARK_MASTER,
    spark_conf: list[str] = SPARK_CONF,
    memory_limit: str = MEMORY_LIMIT,
    temp_dir: str = TEMP_DIR,
) -> None:
    """Audit the split's health: SRM (overall, by day and segment), assignment integrity, leakage,
    identity churn and covariate balance; with --alongside, independence from concurrent tests.
    Column names come from the spec's [audit] tables.

    Exit codes: 0 verdict PASS (or WARN without --strict), 1 WARN with --strict, 3 FAIL (a split
    check fails), 4 bad input (a file, column or row is wrong: nothing was judged), 5 internal error,
    6 the spec's split changed since its lock was recorded (confirm with --accept-changed-split),
    7 the data is stale (only a feed-freshness check fails). The last line on stderr is a one-line
    summary for a scheduler's log.

    Example:
      armlock audit --spec spring.toml --visits visits.parquet --exposures exposures.csv.gz \\
          --identities identities.csv --as-of 2026-12-07 --format markdown --out audit.md
      armlock audit --spec spring.toml --engine spark --visits table:analytics.visits \\
          --exposures s3a://logs/exposures/ --format json --out audit.json
    """
    day = as_of_day(as_of)
    engine_choice = engine_settings(engine, spark_master, spark_conf, memory_limit, temp_dir)
    if alert is not None:
        from .alert_post import check_url

        if (why := check_url(alert)) is not None:
            raise typer.BadParameter(why, param_hint="--alert")
    spec, lock = open_spec_and_lock(spec_path, accept_changed_split=accept)
    from armlock.assign.lock import changes_after_start
    from armlock.audit.run import input_bytes, run_audit  # pandas/scipy load only when an audit runs

    siblings = concurrent_specs(spec_path, alongside or [])
    eng = engine_choice.select()
    with progress(input_bytes(visits, exposures, identities) or None, "reading logs") as advance:
        report = run_audit(spec, visits=visits, exposures=exposures, identities=identities,
                           as_of=day, advance=advance, split_changes=changes_after_start(lock),
                           engine=eng, alongside=siblings)
    from armlock.shared import history

    hist = history.target(history_path) if history_path else history.default_history_path(spec_path)
    before = _previous_run(hist, report) if alert is not None else None
    if record:
        history.record(hist, report)
        if report.data_through:
            err(f"Recorded under {report.as_of}, but the visits end on {report.data_through}: "
                "this row of the history holds data through that day only")
    text = render_as(report, fmt, history.load(hist, report.fingerprint) if fmt == "html" else None,
                     spec.audit.thresholds)
    emit(text, out, what="the report",
         done=f"Wrote the {fmt} report to {out}: verdict {status_word(report.verdict)} ({report.verdict_text})")
    if alert is not None and not isinstance(before, bool):  # False: the history could not be read (said)
        send_alert(alert, spec, report, before, alert_link or (str(out) if out else None))
    finish("audit", report.experiment, report.as_of, report.verdict,
           [(c.id, c.status) for c in report.checks], strict)


def register(app: typer.Typer) -> None:
    app.command("audit")(audit_cmd)
