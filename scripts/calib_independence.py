"""Calibration of the independence check (audit/overlap.py) with real salted hashes and weekly looks.

Null: two tests with independent random salts (10% and 50% holdouts) share N units arriving evenly
over 26 weekly looks; each look runs the check's chi-square on the cumulative cross-tab. Reported:
the share of looks that alarm, and the share of test pairs that alarm at any look (what a team
auditing weekly sees). Alternatives: a copied salt (the same arms), and the same salt with other
weights (a 10% holdout nested in a 20% one): the share of pairs that fail at the first look and at
the last.

Run: nice python scripts/calib_independence.py [pairs]   (about 3 minutes on one core)
"""

from __future__ import annotations

import sys
import time

import numpy as np

from armlock.assign import Spec, assign_many
from armlock.audit.overlap import INDEPENDENCE_P, MIN_EXPECTED, check_independence, crosstab, independence_p

LOOKS = 26


def spec(name: str, salt: str, holdout: int) -> Spec:
    return Spec(name=name, salt=salt, start="2026-01-05T00:00:00Z",
                arms=[{"name": "holdout", "weight": holdout}, {"name": "exposed", "weight": 10_000 - holdout}])


def null_run(n: int, pairs: int, rng: np.random.Generator) -> tuple[float, float, int]:
    ids = [f"v-{rng.bytes(8).hex()}" for _ in range(n)]
    week = np.sort(rng.integers(0, LOOKS, size=n))
    ends = np.searchsorted(week, np.arange(LOOKS), side="right")
    look_alarms = any_alarm = judged = 0
    for _ in range(pairs):
        a = np.array([x == "holdout" for x in assign_many(spec("a", rng.bytes(12).hex(), 1000), ids)])
        b = np.array([x == "holdout" for x in assign_many(spec("b", rng.bytes(12).hex(), 5000), ids)])
        cell = np.stack([a & b, a & ~b, ~a & b, ~a & ~b]).cumsum(axis=1)
        hit = False
        for e in ends:
            if e == 0:
                continue
            tab = cell[:, e - 1].reshape(2, 2)
            res = independence_p(tab)
            if res is None or res[3] < MIN_EXPECTED:
                continue  # the check says "cannot judge": never an alarm, never a pass
            judged += 1
            if res[1] < INDEPENDENCE_P:
                look_alarms += 1
                hit = True
        any_alarm += hit
    return look_alarms / max(judged, 1), any_alarm / pairs, judged


def copied_run(n: int, pairs: int, rng: np.random.Generator, holdout_b: int) -> tuple[float, float]:
    first = max(n // LOOKS, 1)
    fails_first = fails_last = 0
    for _ in range(pairs):
        ids = [f"v-{rng.bytes(8).hex()}" for _ in range(n)]
        salt = rng.bytes(12).hex()
        a, b = spec("a", salt, 1000), spec("b", salt, holdout_b)
        fails_first += check_independence(a, [crosstab(a, b, ids[:first])]).status == "fail"
        fails_last += check_independence(a, [crosstab(a, b, ids)]).status == "fail"
    return fails_first / pairs, fails_last / pairs


def main() -> None:
    pairs = int(sys.argv[1]) if len(sys.argv) > 1 else 400
    rng = np.random.default_rng(20261205)
    print(f"threshold p < {INDEPENDENCE_P:g}, {LOOKS} weekly looks; holdouts 10% and 50%")
    print("| shared units (all looks) | pairs | false alarms per look | pairs alarming at any look |")
    print("|---:|---:|---:|---:|")
    for n, k in ((2_000, pairs), (20_000, pairs), (200_000, max(pairs // 4, 1))):
        t = time.time()
        per_look, any_look, judged = null_run(n, k, rng)
        print(f"| {n:,} | {k:,} | {per_look:.5f} ({judged:,} judged looks) | {any_look:.4f} |"
              f"  <!-- {time.time() - t:.0f} s -->", flush=True)
    print()
    print("| alternative | shared units | pairs | FAIL at first look (n/26) | FAIL at last look |")
    print("|---|---:|---:|---:|---:|")
    for label, hb in (("copied salt (10% and 10%)", 1000), ("same salt, 10% inside 20%", 2000)):
        for n in (2_000, 20_000):
            first, last = copied_run(n, 50, rng, hb)
            print(f"| {label} | {n:,} | 50 | {first:.2f} | {last:.2f} |", flush=True)


if __name__ == "__main__":
    main()
