"""The library entry point: `run_audit(spec, visits=..., exposures=..., identities=...)` -> AuditReport."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

from armlock.assign import Spec, __version__

from .balance import check_balance
from .churn import check_churn
from armlock.shared.lazy import warm_up_stats
from armlock.shared.load import check_as_of
from .feeds import FeedHealth, check_feeds, feed_health
from armlock.shared.engine import Engine, EngineResult, Inputs, canonical, file_bytes, select_engine
from .integrity import check_integrity
from .leakage import check_leakage
from armlock.shared.report import Check, NotChecked, not_checked_sentence, verdict_of
from .model import ArmInfo, AuditReport
from armlock.shared.read import Frames
from .srm import check_srm, check_srm_segments
from armlock.shared.tables import AuditTables

PathLike = str | Path


def input_bytes(*paths: PathLike | None) -> int:
    """Total size of the input files that exist (the progress bar's total); catalog tables count 0."""
    return file_bytes(*paths)

VERDICT_TEXT = {
    "pass": "The split looks healthy: no check found a problem.",
    "warn": "The split needs a look: at least one check warns (see below); results may still be usable.",
    "fail": "The split is broken: at least one check fails; do not read results until it is fixed.",
}


def verdict_text(verdict: str, checks: list[Check], missing: list[NotChecked]) -> str:
    """The verdict in words; what could not be checked comes first, so no reader misses it."""
    if not missing:
        return VERDICT_TEXT[verdict]
    head = not_checked_sentence(missing)
    warned = any(c.status == "warn" and c.judged for c in checks)
    if verdict == "fail":
        return f"{head} {VERDICT_TEXT['fail']}"
    if any(m.gate for m in missing):
        rest = ("The split cannot be called healthy without " + ", ".join(m.title for m in missing if m.gate)
                + ("; a check that ran warns (see below)." if warned else "; the checks that ran found no problem."))
        return f"{head} {rest}"
    if verdict == "warn":
        return f"{head} {VERDICT_TEXT['warn']}"
    return f"{head} The checks that ran found no problem."


def checks_from_tables(spec: Spec, tables: AuditTables, counts: dict[str, int],
                       split_changes: list[str] | None = None, as_of: date | None = None,
                       more_feeds: Sequence[tuple[FeedHealth, str]] = ()) -> list[Check]:
    """The statistics and verdicts, from sufficient statistics only (engine-independent).

    `as_of` is the day every feed should reach (default: the last first-seen day); `more_feeds`
    adds other feeds' health (the readout's orders) to the feed-health check."""
    return [
        check_srm(spec, tables.split),
        check_srm_segments(spec, tables.split),
        check_integrity(spec, tables.integrity, counts, split_changes or []),
        check_leakage(spec, tables.leakage),
        check_churn(spec, tables.churn),
        check_balance(spec, tables.balance),
        check_feeds([*audit_feeds(spec, tables, as_of), *more_feeds]),
    ]


def audit_feeds(spec: Spec, tables: AuditTables, as_of: date | None) -> list[tuple[FeedHealth, str]]:
    """The visits' and the exposure log's health: new visitors up to the as-of date, or the spec's
    `end` once enrolment has ended; exposures up to the as-of date."""
    daily = tables.split.daily
    per_day = {str(d): int(n) for d, n in zip(daily.index, daily.sum(axis=1))} if len(daily) else {}
    start = spec.start.date()
    last = max((date.fromisoformat(d) for d, n in per_day.items() if n), default=start)
    day = as_of or last
    visits_until = min(day, (spec.end - timedelta(microseconds=1)).date()) if spec.end is not None else day
    out = [(feed_health("visits", per_day, visits_until, since=start), "new units")]
    if tables.leakage is not None and tables.leakage.rows:
        out.append((feed_health("exposures", tables.leakage.daily_rows, day, since=start), "exposure rows"))
    return out


def run_audit(
    spec: Spec,
    *,
    visits: PathLike,
    exposures: PathLike | None = None,
    identities: PathLike | None = None,
    as_of: date | None = None,
    advance: Callable[[int], None] | None = None,
    split_changes: list[str] | None = None,
    engine: Engine | str = "duckdb",
    alongside: Sequence[tuple[str, Spec]] = (),
) -> AuditReport:
    """Audit a test's logs as of the end of `as_of` (UTC; default: the last first-seen day).

    Raises `assign.InputError` for unusable files (message names file, column and rows).
    `split_changes` are sentences about confirmed changes of the split made after the start
    (from the lock file): each makes the integrity check fail.
    `advance(n)` is called with each file's size in bytes once it is read (for a progress bar
    whose total is `input_bytes(visits, exposures, identities)`). `engine` is "duckdb" (embedded, the
    default), "pandas" (embedded, every row in memory), "spark" (a SparkSession: the active one, else a local one) or an `audit.engine.Engine`.
    `alongside` names concurrent tests ((spec file, Spec) pairs): the independence check
    (`audit/overlap.py`) then reads the visits file's ids again on this machine.
    """
    check_as_of(as_of)
    warm_up_stats()
    eng = select_engine(engine) if isinstance(engine, str) else engine
    res = eng.compute(spec, Inputs(visits, exposures, identities), as_of, advance or (lambda n: None))
    extra = [concurrent_check(spec, visits, res.as_of, alongside)] if alongside else []
    return build_report(spec, res, split_changes, extra)


def concurrent_check(spec: Spec, visits: PathLike, as_of: date, alongside: Sequence[tuple[str, Spec]]) -> Check:
    """The independence check against concurrent tests, on the visits' units as of `as_of`."""
    from armlock.shared.engine import TABLE_PREFIX
    from armlock.shared.load import load_visits
    from .overlap import TITLE, check_independence, crosstab, shared_mask
    from armlock.shared.read import TIME, UNIT

    if str(visits).startswith(TABLE_PREFIX):
        return Check(id="independence", title=TITLE, status="warn",
                     summary="Cannot judge: the visits are a catalog table, and the independence check reads a "
                             "local visits file; run it on an export of the visits' id and first-seen columns.")
    import pandas as pd

    fr = Frames(visits=pd.DataFrame())
    load_visits(spec, visits, as_of, fr)
    ids, times = fr.visits[UNIT], fr.visits[TIME]
    tabs = [crosstab(spec, sib, ids[shared_mask(times, sib)].tolist(), source=src) for src, sib in alongside]
    return check_independence(spec, tabs)


def build_report(spec: Spec, res: EngineResult, split_changes: list[str] | None = None,
                 extra: Sequence[Check] = ()) -> AuditReport:
    """The report from an engine's result: statistics and verdicts on the canonical tables (and
    `extra` checks computed beside the engine, such as independence from concurrent tests)."""
    checks = checks_from_tables(spec, canonical(res.tables), res.counts, split_changes or [], as_of=res.as_of)
    return report_from_checks(spec, res, res.as_of, [*checks, *extra])


def report_from_checks(spec: Spec, fr: Frames | EngineResult, as_of: date, checks: list[Check]) -> AuditReport:
    """The AuditReport of a set of checks (shared with the readout, which runs the same checks)."""
    verdict, missing = verdict_of(checks)
    return AuditReport(
        experiment=spec.name,
        fingerprint=spec.fingerprint,
        as_of=as_of.isoformat(),
        data_through=fr.data_through.isoformat() if fr.data_through and fr.data_through < as_of else None,
        generated_at=datetime.now(UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z"),
        armlock_version=__version__,
        arms=[ArmInfo(name=a.name, weight=a.weight, role=a.role) for a in spec.arms],
        verdict=verdict,
        verdict_text=verdict_text(verdict, checks, missing),
        input_notes=list(fr.notes),
        checks=checks,
        not_checked=missing,
    )
