"""Exit codes a scheduler can route on, and the one-line summary an audit or readout ends with on stderr.

A scheduler sees only an exit code and a log. So the codes say who must act:

    0  ok             verdict PASS (or WARN without --strict)
    1  warn           --strict and the verdict is WARN
    2  usage          bad command line (click's own code)
    3  split-broken   a split check fails: the analyst must look before anyone reads results
    4  bad-input      the spec or a data file is wrong: nothing was judged
    5  internal-error a bug in armlock
    6  split-changed  the spec's salt or weights changed since its lock was recorded
    7  stale-data     a feed-freshness check fails and no split check does: the data pipeline
                      must catch up (with --strict a freshness warning also gives 7)

"Stale" is defined by check id (`armlock.audit.alerts.STALE_CHECKS`): the audit's feed-freshness check.
"""

from __future__ import annotations

from collections.abc import Iterable

from armlock.assign.errors import (
    EXIT_BAD_INPUT,
    EXIT_FAIL,
    EXIT_INTERNAL,
    EXIT_OK,
    EXIT_SPLIT_CHANGED,
    EXIT_STALE,
    EXIT_USAGE,
    EXIT_WARN,
)
from armlock.audit.alerts import STALE_CHECKS, is_stale_check  # noqa: F401 (STALE_CHECKS re-exported)

# The short name of each code, as the summary line prints it (stable: a log filter may match it).
CODE_NAMES = {
    EXIT_OK: "ok", EXIT_WARN: "warn", EXIT_USAGE: "usage", EXIT_FAIL: "split-broken",
    EXIT_BAD_INPUT: "bad-input", EXIT_INTERNAL: "internal-error", EXIT_SPLIT_CHANGED: "split-changed",
    EXIT_STALE: "stale-data",
}
SUMMARY_MAX = 300  # characters: a scheduler's log line, never a report


def route(verdict: str, checks: Iterable[tuple[str, str]], strict: bool) -> int:
    """The exit code of a verdict and its checks ((id, status) pairs).

    FAIL: 7 when every failing check is a freshness check, else 3. WARN: 0, or with --strict 7
    when a freshness check warns, else 1. PASS: 0.
    """
    checks = list(checks)
    if verdict == "fail":
        failing = [cid for cid, status in checks if status == "fail"]
        return EXIT_STALE if failing and all(is_stale_check(c) for c in failing) else EXIT_FAIL
    if verdict == "warn" and strict:
        stale = any(is_stale_check(cid) and status in ("warn", "fail") for cid, status in checks)
        return EXIT_STALE if stale else EXIT_WARN
    return EXIT_OK


def summary_line(command: str, experiment: str, as_of: str, verdict: str,
                 checks: Iterable[tuple[str, str]], code: int) -> str:
    """One line for a scheduler's log, e.g.
    `armlock audit: exit 3 split-broken; spring as of 2026-12-07; verdict FAIL; failing: srm; warning: balance`.
    """
    from armlock.shared.words import status_word

    checks = list(checks)
    parts = [f"armlock {command}: exit {code} {CODE_NAMES.get(code, 'error')}",
             f"{experiment} as of {as_of}", f"verdict {status_word(verdict)}"]
    for status, word in (("fail", "failing"), ("warn", "warning")):
        ids = [cid for cid, s in checks if s == status]
        if ids:
            parts.append(f"{word}: {', '.join(ids)}")
    line = "; ".join(parts)
    line = "".join(ch if ch.isprintable() else "?" for ch in line)
    return line if len(line) <= SUMMARY_MAX else line[: SUMMARY_MAX - 1] + "…"
