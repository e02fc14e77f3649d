"""Week-by-week history of audit runs in one SQLite file (or a PostgreSQL database), and what changed between two runs.

One row per (spec fingerprint, as-of date): a rerun for the same date replaces its row. The file
is never deleted or recreated once it exists; a corrupt, locked or newer-schema file is refused
with a message naming it, so earlier rows are never lost.
"""

from __future__ import annotations

import json
import math
import sqlite3
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Protocol

from armlock.assign.errors import InputError

from .report import Check
from .words import format_value, status_word

__all__ = ["changes", "default_history_path", "format_value", "load", "load_readouts", "not_passing", "record",
           "record_readout", "row_from_report", "trend_keys"]

SCHEMA_VERSION = 1
SUFFIX = ".history.sqlite"
BUSY_TIMEOUT_S = 15.0
_SQLITE_MAGIC = b"SQLite format 3\x00"

_DDL = (
    "CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
    "CREATE TABLE IF NOT EXISTS runs ("
    " fingerprint TEXT NOT NULL, as_of TEXT NOT NULL, experiment TEXT NOT NULL,"
    " verdict TEXT NOT NULL, recorded_at TEXT NOT NULL, checks TEXT NOT NULL,"
    " figures TEXT NOT NULL, PRIMARY KEY (fingerprint, as_of))",
)
_UPSERT = (
    "INSERT INTO runs (fingerprint, as_of, experiment, verdict, recorded_at, checks, figures)"
    " VALUES (?, ?, ?, ?, ?, ?, ?)"
    " ON CONFLICT (fingerprint, as_of) DO UPDATE SET experiment = excluded.experiment,"
    " verdict = excluded.verdict, recorded_at = excluded.recorded_at,"
    " checks = excluded.checks, figures = excluded.figures"
)


class RecordedReport(Protocol):
    """What the history keeps of a report (the audit's `AuditReport` is one): who, when, verdict, checks."""

    @property
    def fingerprint(self) -> str: ...
    @property
    def as_of(self) -> str: ...
    @property
    def experiment(self) -> str: ...
    @property
    def verdict(self) -> str: ...
    @property
    def checks(self) -> list[Check]: ...


def target(value: str | Path) -> str | Path:
    """A --history value: a PostgreSQL URL (postgresql://...) stays text, anything else is a file path."""
    from .history_pg import is_url

    return value if is_url(value) else Path(value)


def default_history_path(spec_path: str | Path) -> Path:
    """The history file beside the spec: `trial.toml` -> `trial.toml.history.sqlite`."""
    p = Path(spec_path)
    return p.with_name(p.name + SUFFIX)


def row_from_report(report: RecordedReport) -> dict[str, Any]:
    """The history row of one report (the shape `load` returns, without `recorded_at`)."""
    figures = {
        f"{c.id}.{key}": {"label": f.label, "value": f.value, "unit": f.unit}
        for c in report.checks
        for key, f in c.figures.items()
    }
    checks = {c.id: {"title": c.title, "status": c.status} for c in report.checks}
    return {"as_of": report.as_of, "experiment": report.experiment, "verdict": report.verdict,
            "checks": checks, "figures": figures}


def _locked(path: Path) -> InputError:
    return InputError(f"history file {path} is locked by another armlock run; retry in a moment")


def _corrupt(path: Path | str, detail: str) -> InputError:
    if isinstance(path, str):  # a PostgreSQL URL: never print its password
        from .history_pg import shown

        return InputError(f"history database {shown(path)} is not a readable armlock history ({detail}); "
                          "it was left untouched")
    return InputError(
        f"history file {path} is not a readable armlock history ({detail}); it was left untouched. "
        "Move it aside or pass another --history PATH")


def _check_header(path: Path) -> None:
    """Refuse a file that is not SQLite before sqlite3 can write anything into it."""
    try:
        with path.open("rb") as fh:
            head = fh.read(len(_SQLITE_MAGIC))
    except OSError as exc:
        raise InputError(f"history file {path}: cannot read: {exc.strerror}") from None
    if head and head != _SQLITE_MAGIC:
        raise _corrupt(path, "not an SQLite database")


def _check_version(conn: sqlite3.Connection, path: Path) -> None:
    row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    if row is None:
        raise _corrupt(path, "no schema version in its meta table")
    try:
        version = int(row[0])
    except ValueError:
        raise _corrupt(path, f"schema version {row[0]!r} is not a number") from None
    if version > SCHEMA_VERSION:
        raise InputError(
            f"history file {path} has schema version {version}, newer than this armlock reads "
            f"({SCHEMA_VERSION}); upgrade armlock, or pass another --history PATH")


def _connect(path: Path, *, read_only: bool) -> sqlite3.Connection:
    if read_only:
        uri = path.resolve().as_uri() + "?mode=ro"
        conn = sqlite3.connect(uri, uri=True, timeout=BUSY_TIMEOUT_S, isolation_level=None)
    else:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
    return conn


def _db_error(exc: sqlite3.Error, path: Path) -> InputError:
    text = str(exc).lower()
    if "locked" in text or "busy" in text:
        return _locked(path)
    if "not a database" in text or "malformed" in text or "no such table" in text:
        return _corrupt(path, str(exc))
    if "disk is full" in text or "disk i/o error" in text:
        return InputError(f"history file {path}: the disk is full (or failing): this run was not recorded and "
                          "the history is unchanged; free some space and run again")
    return InputError(f"history file {path}: {exc}")


def _upsert(path: Path | str, ddls: tuple[str, ...], sql: str, params: tuple[Any, ...]) -> None:
    """One write to the history file: create what is missing, check the version, upsert one row.

    Refuses a file that is not an armlock history (header, meta table) and turns SQLite's errors
    (locked, corrupt) into input errors naming the file; the write is one IMMEDIATE transaction.
    A PostgreSQL URL goes to `history_pg` (same tables, same rules).
    """
    if isinstance(path, str):
        from . import history_pg

        return history_pg.upsert(path, ddls, sql, params, SCHEMA_VERSION)
    if path.exists():
        _check_header(path)
    elif not path.parent.is_dir():
        raise InputError(f"history file {path}: folder {path.parent} does not exist")
    try:
        conn = _connect(path, read_only=False)
    except sqlite3.Error as exc:
        raise _db_error(exc, path) from None
    try:
        conn.execute("BEGIN IMMEDIATE")
        try:
            tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            if tables and "meta" not in tables:
                raise _corrupt(path, "an SQLite database of something else: it has no meta table")
            for ddl in ddls:
                conn.execute(ddl)
            conn.execute("INSERT OR IGNORE INTO meta (key, value) VALUES ('schema_version', ?)",
                         (str(SCHEMA_VERSION),))
            _check_version(conn, path)
            conn.execute(sql, params)
        except BaseException:
            if conn.in_transaction:  # SQLite rolls back by itself on a full disk; a second ROLLBACK would
                conn.execute("ROLLBACK")  # raise "no transaction is active" and hide the real reason
            raise
        conn.execute("COMMIT")
    except sqlite3.Error as exc:
        raise _db_error(exc, path) from None
    finally:
        conn.close()


def _select(path: Path | str, optional_table: str | None, sql: str, params: tuple[Any, ...]) -> list[tuple[Any, ...]]:
    """Rows of one query on the history file, read-only; `[]` when the file does not exist, or when
    `optional_table` (a table added after the file's format, created on first use) is not there yet."""
    if isinstance(path, str):
        from . import history_pg

        return history_pg.select(path, optional_table, sql, params, SCHEMA_VERSION)
    if not path.exists():
        return []
    _check_header(path)
    if path.stat().st_size == 0:
        return []
    try:
        conn = _connect(path, read_only=True)
    except sqlite3.Error as exc:
        raise _db_error(exc, path) from None
    try:
        _check_version(conn, path)
        if optional_table and not conn.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?",
                                               (optional_table,)).fetchone():
            return []
        return list(conn.execute(sql, params).fetchall())
    except sqlite3.Error as exc:
        raise _db_error(exc, path) from None
    finally:
        conn.close()


def _now() -> str:
    return datetime.now(UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def record(path: str | Path, report: RecordedReport) -> None:
    """Keep one run's verdict, check statuses and figures; replaces the row of the same as-of date."""
    row = row_from_report(report)
    _upsert(target(path), _DDL, _UPSERT, (report.fingerprint, row["as_of"], row["experiment"], row["verdict"],
                                        _now(), json.dumps(row["checks"]), json.dumps(row["figures"])))


def load(path: str | Path, fingerprint: str) -> list[dict[str, Any]]:
    """Every recorded run of one spec, oldest as-of first; `[]` when the file does not exist."""
    path = target(path)
    rows = _select(path, None, "SELECT as_of, experiment, verdict, recorded_at, checks, figures FROM runs"
                                 " WHERE fingerprint = ? ORDER BY as_of", (fingerprint,))
    out = []
    for as_of, experiment, verdict, recorded_at, checks, figures in rows:
        try:
            out.append({"as_of": as_of, "experiment": experiment, "verdict": verdict,
                        "recorded_at": recorded_at, "checks": json.loads(checks),
                        "figures": json.loads(figures)})
        except json.JSONDecodeError as exc:
            raise _corrupt(path, f"row for as-of {as_of} is not valid JSON: {exc.msg}") from None
    return out


def not_passing(run: dict[str, Any]) -> str:
    """Why a recorded run is not PASS, in a few words: its failing checks' ids ("srm, leakage"),
    else its warning ones ("warn: balance"), else "-"."""
    checks = run.get("checks", {})
    for status, prefix in (("fail", ""), ("warn", "warn: ")):
        ids = [cid for cid, info in checks.items() if info.get("status") == status]
        if ids:
            return prefix + ", ".join(ids)
    return "-"


# --- what changed --------------------------------------------------------------------------------

def trend_keys(runs: list[dict[str, Any]], limit: int = 4) -> list[str]:
    """The figures worth following week by week: each check's headline (its first share or
    p-value figure), failing checks first, then warning ones, then the rest in report order."""
    if not runs:
        return []
    latest = runs[-1]
    rank = {"fail": 0, "warn": 1, "pass": 2, "skipped": 3}
    order = sorted(enumerate(latest.get("checks", {}).items()),
                   key=lambda x: (rank.get(x[1][1].get("status", "pass"), 2), x[0]))
    keys = []
    for _, (cid, _info) in order:
        head = next((k for k, f in latest["figures"].items()
                     if k.startswith(cid + ".") and f.get("unit") in ("share", "p")), None)
        if head:
            keys.append(head)
    return keys[:limit]


# Figures with a threshold in `[audit.thresholds]`: (warn key, fail key, "above"|"below").
# "above": the check warns/fails when the figure exceeds the threshold; "below": when p falls under it.
# A new check (or the readout) adds its own headline figures here to have their crossings named.
THRESHOLDS: dict[str, tuple[str | None, str | None, str]] = {
    "srm.p_anytime": (None, "srm_anytime_p", "below"),
    "srm_segments.min_p_holm": (None, "srm_p", "below"),
    "integrity.mismatch_rate": ("mismatch_warn", "mismatch_fail", "above"),
    "leakage.holdout_leak_share": ("leak_warn", "leak_fail", "above"),
    "leakage.pre_exposed_share": ("pre_exposure_warn", "pre_exposure_fail", "above"),
    "churn.multi_arm_share": ("churn_warn", "churn_fail", "above"),
    "balance.min_p_holm": (None, "balance_p", "below"),
}
# Units whose moves are worth a sentence: rates and p-values. Counts always grow week by week,
# so a count that grew says nothing; a count that matters has a share or a threshold beside it.
SHIFT_UNITS = ("share", "p", "ratio")


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _crossing(key: str, label: str, old: Any, new: Any, unit: str, th: Any) -> str | None:
    """A sentence when a figure moved across its warn or fail threshold (either way), else None."""
    rule = THRESHOLDS.get(key)
    if rule is None or th is None or not (_number(old) and _number(new)):
        return None
    warn_key, fail_key, side = rule
    for level, attr in (("fail", fail_key), ("warn", warn_key)):
        if attr is None:
            continue
        limit = float(getattr(th, attr))
        def bad(v: float, limit: float = limit) -> bool:
            return v > limit if side == "above" else v < limit

        if bad(old) != bad(new):
            word = "above" if side == "above" else "below"
            went = "rose" if new > old else "fell"
            where = "crossed" if bad(new) else "is back within"
            return (f"{label} {went} from {format_value(old, unit)} to {format_value(new, unit)} and "
                    f"{where} the {level} threshold ({format_value(limit, unit)}; {level} when {word} it)")
    return None


def _shifted(old: Any, new: Any, unit: str) -> bool:
    """Whether a rate or p-value moved for real (cut-offs: common practice, not a standard).

    Shares: at least 0.1 percentage point and a fifth of the old value. p-values: an order of
    magnitude. Ratios: a fifth. Other units (counts, numbers, dates, text) are never "shifts".
    """
    if unit not in SHIFT_UNITS or not (_number(old) and _number(new)):
        return False
    if unit == "p":
        lo, hi = max(min(old, new), 1e-300), max(old, new, 1e-300)
        return math.log10(hi) - math.log10(lo) >= 1
    if unit == "share":
        return abs(new - old) >= 0.001 and abs(new - old) >= 0.2 * abs(old)
    return abs(new - old) >= 0.2 * abs(old) if old else new != old


def _as_row(run: RecordedReport | dict[str, Any]) -> dict[str, Any]:
    return run if isinstance(run, dict) else row_from_report(run)


def changes(previous: dict[str, Any], current: RecordedReport | dict[str, Any], thresholds: Any = None) -> list[str]:
    """What matters since the previous run, as sentences, most important first.

    1. the verdict, if it changed; 2. each check whose status changed; 3. each headline figure
    that crossed its threshold (`thresholds` is the spec's `AuditThresholds`); 4. rates and
    p-values that shifted for real. Counts that merely grew are not news and are not said.
    """
    prev, cur = _as_row(previous), _as_row(current)
    out: list[str] = []
    if prev.get("verdict") != cur.get("verdict"):
        out.append(f"the verdict went from {status_word(str(prev.get('verdict')))} to "
                   f"{status_word(str(cur.get('verdict')))}")
    pchecks, cchecks = prev.get("checks", {}), cur.get("checks", {})
    for cid, info in cchecks.items():
        old = pchecks.get(cid)
        if old is not None and old.get("status") != info.get("status"):
            out.append(f"check “{info.get('title', cid)}” went from {status_word(str(old.get('status')))} "
                       f"to {status_word(str(info.get('status')))}")
    pfig = prev.get("figures", {})
    crossed, shifted = [], []
    for key, fig in cur.get("figures", {}).items():
        old_fig = pfig.get(key)
        if old_fig is None:
            continue
        unit = fig.get("unit", "number")
        a, b = old_fig.get("value"), fig.get("value")
        label = fig.get("label", key)
        said = _crossing(key, label, a, b, unit, thresholds)
        if said:
            crossed.append(said)
        elif _shifted(a, b, unit):
            shifted.append(f"{label} {'rose' if b > a else 'fell'} from {format_value(a, unit)} to {format_value(b, unit)}")
    return out + crossed + shifted


# --- readouts (armlock readout --record) ----------------------------------------------------------
# A table of its own beside `runs`, created on first use: files written before it existed stay
# readable by both versions (same schema_version; an older armlock ignores the extra table).

_READOUT_DDL = (
    "CREATE TABLE IF NOT EXISTS readouts ("
    " fingerprint TEXT NOT NULL, as_of TEXT NOT NULL, experiment TEXT NOT NULL,"
    " status TEXT NOT NULL, recorded_at TEXT NOT NULL, figures TEXT NOT NULL,"
    " PRIMARY KEY (fingerprint, as_of))"
)
_READOUT_UPSERT = (
    "INSERT INTO readouts (fingerprint, as_of, experiment, status, recorded_at, figures)"
    " VALUES (?, ?, ?, ?, ?, ?)"
    " ON CONFLICT (fingerprint, as_of) DO UPDATE SET experiment = excluded.experiment,"
    " status = excluded.status, recorded_at = excluded.recorded_at, figures = excluded.figures"
)


def record_readout(path: str | Path, *, fingerprint: str, as_of: str, experiment: str, status: str,
                   figures: dict[str, dict[str, Any]]) -> None:
    """Keep one readout's gate status and headline figures ({key: {label, value, unit}}); a rerun
    for the same as-of date replaces its row. Same file, locking and refusals as `record`."""
    _upsert(target(path), (*_DDL, _READOUT_DDL), _READOUT_UPSERT,
            (fingerprint, as_of, experiment, status, _now(), json.dumps(figures)))


def load_readouts(path: str | Path, fingerprint: str) -> list[dict[str, Any]]:
    """Every recorded readout of one spec, oldest as-of first; `[]` when there is none."""
    path = target(path)
    rows = _select(path, "readouts", "SELECT as_of, experiment, status, recorded_at, figures FROM readouts"
                                     " WHERE fingerprint = ? ORDER BY as_of", (fingerprint,))
    out = []
    for as_of, experiment, status, recorded_at, figures in rows:
        try:
            out.append({"as_of": as_of, "experiment": experiment, "status": status,
                        "recorded_at": recorded_at, "figures": json.loads(figures)})
        except json.JSONDecodeError as exc:
            raise _corrupt(path, f"readout row for as-of {as_of} is not valid JSON: {exc.msg}") from None
    return out
