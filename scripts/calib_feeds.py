"""Feed-health calibration: false alarms of healthy feeds over 26 weekly audits, and power against
outages and feeds that stop early. Figures go to docs/feed-health.md.

Healthy feeds are the invented shop's daily counts (`audit.synth.healthy_daily_counts`: weekday
swings, holidays, a slow week, overdispersed Poisson counts), new visitors front-loaded, exposure
and order rows flat. Each simulated test is audited at the end of weeks 1..26 (as-of = that day);
a false alarm is any WARN or FAIL of `audit.feeds.feed_health` at any of the 26 looks.

Run: nice python scripts/calib_feeds.py [reps]   (default 2,000 tests per size)
"""

from __future__ import annotations

import sys
from datetime import date, timedelta

import numpy as np

from armlock.audit.feeds import feed_health
from armlock.audit.synth import healthy_daily_counts

WEEKS = 26
DAYS = WEEKS * 7
START = date(2026, 1, 5)
SIZES = (("new visitors", 10.0, 60.0), ("new visitors", 100.0, 60.0), ("new visitors", 1_000.0, 60.0),
         ("new visitors", 100_000.0, 60.0), ("rows (exposures, orders)", 30.0, None),
         ("rows (exposures, orders)", 3_000.0, None), ("rows (exposures, orders)", 300_000.0, None))


def as_daily(counts: np.ndarray) -> dict[str, int]:
    return {(START + timedelta(days=i)).isoformat(): int(n) for i, n in enumerate(counts) if n}


def looks_status(counts: np.ndarray) -> list[str]:
    """The feed's status at each of the 26 weekly looks."""
    out = []
    for k in range(1, WEEKS + 1):
        until = START + timedelta(days=7 * k - 1)
        out.append(feed_health("feed", as_daily(counts[:7 * k]), until, since=START).status)
    return out


def false_alarms(reps: int, level: float, decay: float | None, seed: int) -> tuple[float, float]:
    rng = np.random.default_rng(seed)
    warn = fail = 0
    for _ in range(reps):
        st = looks_status(healthy_daily_counts(rng, DAYS, level, decay_days=decay,
                                               start_weekday=int(rng.integers(7))))
        warn += any(s != "pass" for s in st)
        fail += "fail" in st
    return warn / reps, fail / reps


def power(reps: int, level: float, decay: float | None, seed: int) -> dict[str, float]:
    """Detection at the look after the fault (week 8's audit), each fault on its own."""
    rng = np.random.default_rng(seed)
    look = 8 * 7 - 1
    until = START + timedelta(days=look)
    hits: dict[str, int] = {}
    for _ in range(reps):
        base = healthy_daily_counts(rng, DAYS, level, decay_days=decay, start_weekday=int(rng.integers(7)))
        cases = {}
        for share in (0.0, 0.1, 0.2):
            c = base.copy()
            c[look - 10] = rng.binomial(c[look - 10], share)
            cases[f"one outage day at {share:.0%}"] = c
        for behind in (1, 2, 7, 28):
            c = base.copy()
            c[look - behind + 1:] = 0
            cases[f"feed ends {behind} day(s) early"] = c
        for name, c in cases.items():
            st = feed_health("feed", as_daily(c[:look + 1]), until, since=START).status
            hits[name + ": flagged"] = hits.get(name + ": flagged", 0) + (st != "pass")
            hits[name + ": FAIL"] = hits.get(name + ": FAIL", 0) + (st == "fail")
    return {k: v / reps for k, v in hits.items()}


def main() -> None:
    reps = int(sys.argv[1]) if len(sys.argv) > 1 else 2_000
    print(f"False alarms over {WEEKS} weekly audits, {reps:,} healthy feeds per size")
    print("| feed | usual rows on day 1 | flagged (WARN or FAIL) | FAIL |")
    print("|---|---:|---:|---:|")
    for i, (what, level, decay) in enumerate(SIZES):
        w, f = false_alarms(reps, level, decay, seed=100 + i)
        print(f"| {what} | {level:,.0f} | {w:.2%} | {f:.2%} |")
    print()
    print(f"Power at the week-8 audit, {reps // 4:,} feeds per size")
    for i, (what, level, decay) in enumerate(SIZES):
        res = power(reps // 4, level, decay, seed=200 + i)
        print(f"- {what}, {level:,.0f}/day: " + "; ".join(f"{k} {v:.1%}" for k, v in res.items()))


if __name__ == "__main__":
    main()
