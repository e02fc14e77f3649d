"""When an audit is worth a message, and the message: at most 500 characters for a chat or e-mail relay.

An alert goes out when, against the previous recorded run of the same spec:
- the verdict got worse (PASS -> WARN -> FAIL; a first run counts as after a PASS);
- a feed went stale: the feed-freshness check got worse (`armlock.routing`'s stale checks);
- the test reached its planned end (the spec's `end`) with this run.
Never for an unchanged PASS, and never twice for the same news: an unchanged WARN or FAIL is
already known. Delivery (HTTP, retries) is the CLI's (`armlock/alert_post.py`).
"""

from __future__ import annotations

from datetime import UTC, date
from typing import Any

from armlock.assign import Spec

from armlock.shared.history import changes, row_from_report
from armlock.shared.report import SEVERITY
from .model import AuditReport
from armlock.shared.words import status_word

MAX_CHARS = 500
# Check ids that judge whether a feed is current rather than whether the split is healthy (the
# feed-health check `freshness`): their failure alone means "the data is stale". The exit code
# (`armlock/routing.py`) and the alerts both read this one list.
STALE_CHECKS = frozenset({"freshness", "feed_freshness"})


def is_stale_check(check_id: str) -> bool:
    """Whether a check judges a feed's freshness (`freshness`, or an id `freshness_<feed>`)."""
    return check_id in STALE_CHECKS or check_id.startswith(("freshness_", "freshness."))


def previous_run(runs: list[dict[str, Any]], as_of: str) -> dict[str, Any] | None:
    """The latest recorded run before `as_of` (a rerun of the same day is not its own previous run)."""
    before = [r for r in runs if r["as_of"] < as_of]
    return before[-1] if before else None


def alert_reasons(spec: Spec, report: AuditReport, previous: dict[str, Any] | None) -> list[str]:
    """What is news in this run, as short phrases; [] when nothing is worth a message."""
    reasons: list[str] = []
    was = previous["verdict"] if previous else "pass"
    if SEVERITY.get(report.verdict, 0) > SEVERITY.get(was, 0):
        reasons.append(f"verdict went from {status_word(was)} to {status_word(report.verdict)}"
                       if previous else f"first recorded verdict is {status_word(report.verdict)}")
    old_checks = previous.get("checks", {}) if previous else {}
    for c in report.checks:
        if is_stale_check(c.id) and c.status in ("warn", "fail"):
            before = old_checks.get(c.id, {}).get("status", "pass")
            if SEVERITY.get(c.status, 0) > SEVERITY.get(before, 0):
                cut = c.summary.split(". ")[0].rstrip(".")
                reasons.append(f"a feed went stale ({cut})")
    if spec.end is not None:
        end = spec.end.astimezone(UTC).date()
        now = date.fromisoformat(report.as_of)
        then = date.fromisoformat(previous["as_of"]) if previous else None
        if now >= end and (then is None or then < end):
            reasons.append(f"the test reached its planned end ({end.isoformat()})")
    return reasons


def alert_message(report: AuditReport, reasons: list[str], previous: dict[str, Any] | None,
                  link: str | None) -> str:
    """One message of at most MAX_CHARS: test, status, what changed, the link (never cut)."""
    head = f"armlock: {report.experiment} is {status_word(report.verdict)} as of {report.as_of}"
    failing = [c.title for c in report.checks if c.status == "fail"]
    said = [x for x in (changes(previous, row_from_report(report)) if previous else [])
            if not x.startswith("the verdict went")]  # the verdict is already said in the reasons
    parts = ["; ".join(reasons)]
    if failing:
        parts.append("failing: " + ", ".join(failing))
    if said:
        parts.append("changed: " + "; ".join(said))
    tail = f" {link}" if link else ""
    body = ". ".join(p[:1].upper() + p[1:] for p in parts if p) + "."
    text = f"{head}. {body}"
    room = MAX_CHARS - len(tail)
    if len(text) > room:
        text = text[: room - 1].rstrip() + "…"
    text = "".join(ch if ch.isprintable() else " " for ch in text)
    return (text + tail)[:MAX_CHARS]


def alert_payload(report: AuditReport, reasons: list[str], message: str, link: str | None) -> dict[str, Any]:
    """The JSON body posted: `text` (what chat webhooks show) and the same facts as fields."""
    return {"text": message, "experiment": report.experiment, "as_of": report.as_of,
            "status": report.verdict, "reasons": reasons, "link": link}
