"""Feed health (issue #20): stale feeds, feeds that end early and outage days are flagged; healthy
feeds with weekday and holiday swings are not (a small calibration that can fail; the large one is
scripts/calib_feeds.py, figures in docs/feed-health.md)."""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import spec_from_dict
from armlock.audit.feeds import feed_health
from armlock.audit.run import run_audit
from armlock.audit.synth import generate, healthy_daily_counts, write_logs

START = date(2026, 1, 5)
SPEC = spec_from_dict({"name": "feeds", "salt": "invented-feeds-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}]})


def _daily(counts: np.ndarray) -> dict[str, int]:
    return {(START + timedelta(days=i)).isoformat(): int(n) for i, n in enumerate(counts)}


def _looks(counts: np.ndarray) -> list[str]:
    return [feed_health("f", _daily(counts[:7 * k]), START + timedelta(days=7 * k - 1), since=START).status
            for k in range(1, 27)]


@pytest.mark.parametrize("level, decay", [(300.0, 60.0), (5_000.0, None)])
def test_healthy_feeds_rarely_alarm_over_26_weekly_audits(level: float, decay: float | None) -> None:
    """30 invented healthy feeds x 26 weekly audits each: at most one test may alarm (the large
    run measured 0 in 1,000 per size; with a 1% rate, 2+ of 30 has probability 3.6%)."""
    rng = np.random.default_rng(7)
    alarms = sum(any(s != "pass" for s in _looks(healthy_daily_counts(rng, 182, level, decay_days=decay,
                                                                       start_weekday=int(rng.integers(7)))))
                 for _ in range(30))
    assert alarms <= 1


def test_outage_days_and_early_ends_are_flagged() -> None:
    rng = np.random.default_rng(8)
    caught_outage = caught_end = 0
    for _ in range(20):
        c = healthy_daily_counts(rng, 56, 2_000.0, decay_days=None)
        out = c.copy()
        out[40] = 0  # a day the tag did not fire
        h = feed_health("f", _daily(out), START + timedelta(days=55), since=START)
        caught_outage += h.status == "warn" and [d for d, _, _ in h.low_days] == [START + timedelta(days=40)]
        end = c.copy()
        end[50:] = 0  # the export stops six days early
        caught_end += feed_health("f", _daily(end), START + timedelta(days=55), since=START).status == "fail"
    assert caught_outage >= 19 and caught_end == 20


def test_stale_days_never_improve_the_status() -> None:
    c = healthy_daily_counts(np.random.default_rng(9), 84, 500.0)
    order = {"pass": 0, "warn": 1, "fail": 2}
    seen = [order[feed_health("f", _daily(c), START + timedelta(days=83 + k), since=START).status]
            for k in (0, 1, 2, 7, 28, 365, 3_000)]
    assert seen == sorted(seen) and seen[0] == 0 and seen[-1] == 2


@pytest.fixture(scope="module")
def logs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    lg = generate(SPEC, units=8_000, days=84, seed=5)
    out = tmp_path_factory.mktemp("feeds")
    paths = write_logs(lg, out, "parquet")
    e = lg.exposures
    t = pd.to_datetime(e["event_time"], utc=True)
    e[t < pd.Timestamp("2026-03-29", tz="UTC") - pd.Timedelta(days=42)].to_parquet(out / "early.parquet", index=False)
    paths["early"] = out / "early.parquet"
    return paths


def _freshness(rep):  # type: ignore[no-untyped-def]
    return next(c for c in rep.checks if c.id == "freshness")


def test_audit_fails_visits_four_weeks_stale(logs: dict[str, Path]) -> None:
    rep = run_audit(SPEC, visits=logs["visits"], exposures=logs["exposures"], as_of=date(2026, 4, 26))
    c = _freshness(rep)
    assert c.status == "fail" and rep.verdict == "fail" and "visits feed ends on 2026-03-29, 28 day(s)" in c.summary


def test_audit_fails_an_exposure_log_that_stops_six_weeks_early(logs: dict[str, Path]) -> None:
    rep = run_audit(SPEC, visits=logs["visits"], exposures=logs["early"])
    c = _freshness(rep)
    assert c.status == "fail" and "exposures feed ends on" in c.summary and "visits" not in c.summary.split(";")[0]


def test_audit_of_healthy_logs_passes_the_feed_check(logs: dict[str, Path]) -> None:
    assert _freshness(run_audit(SPEC, visits=logs["visits"], exposures=logs["exposures"])).status == "pass"


def test_new_visitors_are_expected_only_up_to_the_specs_end(logs: dict[str, Path]) -> None:
    ended = spec_from_dict({"name": "feeds", "salt": "invented-feeds-2026", "start": "2026-01-05T00:00:00Z",
                            "end": "2026-03-30T00:00:00Z",
                            "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}]})
    rep = run_audit(ended, visits=logs["visits"], as_of=date(2026, 4, 20))
    c = _freshness(rep)
    row = next(r for r in c.tables[0].rows if r[0] == "visits")
    assert row[3] == "2026-03-29" and row[4] == 0


def test_a_last_day_cut_mid_day_is_said_as_such() -> None:
    c = healthy_daily_counts(np.random.default_rng(10), 56, 2_000.0, decay_days=None)
    c[55] = c[55] // 40  # the export stopped at about half past midnight
    h = feed_health("visits", _daily(c), START + timedelta(days=55), since=START)
    from armlock.audit.feeds import feed_sentence

    assert h.status == "warn" and "looks cut during that day (audit as of the day before)" in feed_sentence(h, "rows")
