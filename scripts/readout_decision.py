"""Calibration of the readout's decision rule (figures for docs/readout-decision.md).

    nice -n 10 python scripts/readout_decision.py > readout_decision.txt

Simulated tests whose channel is exactly at break-even, read every week: how often the rule
(anytime interval before the planned final look, fixed-horizon interval at it; readout/decision.py)
ever says "pays" (with its floor of MIN_BUYERS buyers per side, and without it), against reading the fixed interval every week and reading it once at the end.
4,000 tests per row, 10% and 50% holdouts, 8 and 12 weekly looks, three sizes. The test suite
runs a smaller version (tests/readout/test_decision.py).
"""

from __future__ import annotations

import sys
import time

from armlock.readout.decision import MIN_BUYERS
from armlock.readout.simulate import false_pays


def main() -> int:
    t0 = time.time()
    print("False 'pays' at break-even, read weekly (share of 4,000 tests that ever said 'pays'; alpha = 0.05)")
    print(f"{'holdout':>7} {'weeks':>5} {'units/week':>10} {'final units':>11} {'rule':>6} {'no floor':>8} "
          f"{'fixed, weekly':>13} {'fixed, once':>11}")
    for share in (0.1, 0.5):
        for weeks in (8, 12):
            for per_week in (2_000, 20_000, 100_000):
                r = false_pays(tests=4_000, weeks=weeks, per_week=per_week, holdout_share=share,
                               seed=weeks * 1_000_003 + per_week + int(share * 10), min_buyers=MIN_BUYERS)
                print(f"{share:>7.0%} {weeks:>5} {per_week:>10,} {r.units:>11,} {r.rule:>6.2%} {r.rule_no_floor:>8.2%} "
                      f"{r.fixed_weekly:>13.2%} {r.fixed_once:>11.2%}", flush=True)
    print(f"\n({time.time() - t0:.0f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
