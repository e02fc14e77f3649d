"""Feed health: is each log fresh up to the day it should reach, and does it have no outage days?

Pure statistics on daily counts (`audit.tables`: new units per first-seen day, exposure rows per
day; the readout adds order rows per day). A feed should run to the as-of date; new visitors only
to the spec's `end` once enrolment has ended (orders and exposures keep flowing after it).

Rules (thresholds our choice, calibrated in `scripts/calib_feeds.py`, figures in docs/feed-health.md):

- **Stale or ended early.** `behind` days from the feed's last day with rows to the day it should
  reach. The rows it should have had meanwhile are `behind x baseline`, the baseline being the
  mean of its last `BASELINE_DAYS` days with data. At least `MIN_MISSING` expected rows missing
  (a Poisson count of mean 20 is zero with probability 2e-9): one day behind warns (a pipeline
  that lands a day late), two or more fail.
- **Outage days.** A day whose count is below `LOW_SHARE` of its usual count (`baselines`: the
  median of the `BASELINE_DAYS` days before it, or of the same weekday in the 4 weeks before it
  when lower; at least `MIN_BASELINE`) and improbably low even for a deep holiday in a slow week
  (Poisson probability below `LOW_P` of so few at `DEEP_DAY` of usual) warns: a tag outage loses
  units or rows in every arm alike, which shrinks the test without biasing it.
- A feed with no rows at all, or with too little traffic to tell a missing day from chance, is
  not judged for gaps; the check says so.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np
# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.shared.report import Check, Figure, Status, Table, worst

BASELINE_DAYS = 14
MIN_MISSING = 20.0
LOW_SHARE = 0.15
DEEP_DAY = 0.3  # a deep holiday in a slow week: the lowest share of a usual day a healthy feed reaches
LOW_P = 1e-3
MIN_BASELINE = 20.0
TITLE = "Feed freshness and gaps"


@dataclass
class FeedHealth:
    """One feed's health: how far behind it is, its outage days, and the status they give."""

    feed: str
    first: date | None
    last: date | None
    until: date
    behind: int
    missing: float  # rows expected in the days behind
    low_days: list[tuple[date, int, float]]  # (day, count, baseline)
    status: Status
    judged_gaps: bool


def baselines(counts: np.ndarray) -> np.ndarray:
    """Each day's usual count, from the days before it only: the median of the `BASELINE_DAYS` days
    before it (at least 7; NaN before), or, when lower, the median of the same weekday in the 4
    weeks before it (at least 2 of them), so a usual Sunday is compared with Sundays."""
    n = len(counts)
    out = np.full(n, np.nan)
    for i in range(7, min(BASELINE_DAYS, n)):
        out[i] = np.median(counts[:i])
    if n > BASELINE_DAYS:
        win = np.lib.stride_tricks.sliding_window_view(counts[:-1], BASELINE_DAYS)
        out[BASELINE_DAYS:] = np.median(win, axis=1)
    if n > 14:  # the same weekday 1-4 weeks before (NaN where the series has not begun)
        lagged = np.full((4, n), np.nan)
        for w in range(1, 5):
            if 7 * w < n:
                lagged[w - 1, 7 * w:] = counts[:n - 7 * w]
        same = np.nanmedian(lagged[:, 14:], axis=0)
        out[14:] = np.fmin(out[14:], same)
    return out


def feed_health(feed: str, daily: dict[str, int], until: date, *, since: date | None = None) -> FeedHealth:
    """The health of one feed from its rows per UTC day (YYYY-MM-DD -> count) up to `until`.

    Days before `since` (the test's start) are ignored; days with no rows between the first and the
    last day with rows count as zero.
    """
    from scipy import stats
    days = sorted((date.fromisoformat(d), int(n)) for d, n in daily.items() if int(n) > 0)
    days = [(d, n) for d, n in days if (since is None or d >= since) and d <= until]
    if not days:
        return FeedHealth(feed, None, None, until, 0, 0.0, [], "warn", False)
    first, last = days[0][0], days[-1][0]
    span = (last - first).days + 1
    counts = np.zeros(span, dtype=np.float64)
    for d, n in days:
        counts[(d - first).days] = n
    behind = max((until - last).days, 0)
    tail = counts[-BASELINE_DAYS:]
    base_end = float(tail.mean())
    missing = behind * base_end
    status: Status = "pass"
    if missing >= MIN_MISSING:
        status = "fail" if behind >= 2 else "warn"
    base = baselines(counts)
    usable = base >= MIN_BASELINE  # NaN (fewer than 7 days before) compares False
    judged = bool(usable.any())
    safe = np.where(usable, base, 0.0)
    cand = np.flatnonzero(usable & (counts < LOW_SHARE * safe))
    # below even a deep holiday beyond Poisson chance (at small counts a low day is often chance)
    cand = cand[stats.poisson.cdf(counts[cand], DEEP_DAY * safe[cand]) < LOW_P] if len(cand) else cand
    low = [(first + timedelta(days=int(i)), int(counts[i]), float(base[i])) for i in cand]
    if low and status == "pass":
        status = "warn"
    return FeedHealth(feed, first, last, until, behind, missing, low, status, judged)


def feed_sentence(h: FeedHealth, word: str) -> str:
    if h.last is None:
        return f"the {h.feed} feed has no {word} on or before {h.until}"
    parts = []
    if h.missing >= MIN_MISSING:
        parts.append(f"the {h.feed} feed ends on {h.last}, {h.behind} day(s) before {h.until} where it should reach "
                     f"(about {h.missing:,.0f} {word} missing at its recent rate)")
    inside = [x for x in h.low_days if x[0] != h.until]
    if inside:
        shown = ", ".join(f"{d} ({n:,} against a usual {b:,.0f})" for d, n, b in inside[:5])
        more = f" and {len(inside) - 5} more" if len(inside) > 5 else ""
        parts.append(f"the {h.feed} feed has {len(inside)} day(s) with under {LOW_SHARE:.0%} of its usual {word}: "
                     f"{shown}{more} (a tag or export outage)")
    for d, n, b in h.low_days:
        if d == h.until:  # the as-of day itself, far below usual: most often an export cut mid-day
            parts.append(f"the {h.feed} feed's last day, {d}, has {n:,} {word} against a usual {b:,.0f}: the export "
                         "looks cut during that day (audit as of the day before), or the tag failed")
    return "; ".join(parts)


def check_feeds(feeds: list[tuple[FeedHealth, str]]) -> Check:
    """The feed-health check over (health, word for its rows) pairs; its id is `freshness`."""
    status = worst([h.status for h, _ in feeds])
    bad = [feed_sentence(h, w) for h, w in feeds if h.status != "pass"]
    unjudged = [h.feed for h, _ in feeds if h.last is not None and not h.judged_gaps and h.status == "pass"]
    if bad:
        summary = (bad[0][:1].upper() + bad[0][1:] + "".join(f"; {b}" for b in bad[1:])
                   + ". Results read from a feed that stops early or has holes miss those days: rerun once the "
                   "export has caught up, or choose an --as-of the feeds reach.")
    else:
        summary = ("Every feed reaches the day it should (" + ", ".join(f"{h.feed} to {h.last}" for h, _ in feeds)
                   + ") with no outage day.")
        if unjudged:
            summary += (" Too little daily traffic to tell an outage day from chance in: " + ", ".join(unjudged)
                        + ".")
    rows = [[h.feed, h.first.isoformat() if h.first else None, h.last.isoformat() if h.last else None,
             h.until.isoformat(), h.behind, round(h.missing, 1), len(h.low_days)] for h, _ in feeds]
    figs = {f"{h.feed}_days_behind": Figure(label=f"days the {h.feed} feed is behind", value=h.behind, unit="count")
            for h, _ in feeds}
    figs["outage_days"] = Figure(label="outage days over all feeds", value=sum(len(h.low_days) for h, _ in feeds),
                                 unit="count")
    tables = [Table(title="Feeds: last day with rows against the day each should reach",
                    columns=["feed", "first day", "last day", "should reach", "days behind", "rows missing (est.)",
                             "outage days"], rows=rows)]
    low = [[h.feed, d.isoformat(), n, round(b, 1)] for h, _ in feeds for d, n, b in h.low_days]
    if low:
        tables.append(Table(title="Outage days (under a fifth of the usual rows)",
                            columns=["feed", "day", "rows", "usual (median of the 14 days before)"], rows=low))
    return Check(id="freshness", title=TITLE, status=status, summary=summary, figures=figs, tables=tables)
