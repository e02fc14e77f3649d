"""Calibration of the readout's intervals at full size (figures for docs/readout-methods.md).

    nice -n 10 python scripts/readout_calibration.py > readout_calibration.txt

1. Weekly looks: 1,000 simulated tests read every week for 26 weeks, under no effect and under
   a 10% lift, at three sizes: how often the anytime interval and the fixed-horizon interval
   exclude the truth at ANY look (the anytime one should stay at or below 5%).
2. Coverage of the 95% fixed-horizon interval, raw (Welch) and CUPED, over 1,000 simulated
   tests with a known effect at three sizes (target 93-97%).
The test suite runs smaller versions of both (tests/readout/).
"""

from __future__ import annotations

import sys
import time

from armlock.readout.simulate import coverage, sequential_misses


def main() -> int:
    t0 = time.time()
    print("Weekly looks, 26 weeks, 1,000 tests each (share of tests whose interval ever missed the truth)")
    print(f"{'effect':>8} {'units/week':>10} {'final units':>11} {'anytime':>8} {'fixed, weekly':>13} {'fixed, once':>11}")
    for label, p1 in (("none", 0.04), ("+10%", 0.044)):
        for per_week in (400, 4_000, 40_000):
            r = sequential_misses(tests=1_000, weeks=26, per_week=per_week, p_holdout=0.04, p_exposed=p1,
                                  seed=per_week + int(p1 * 1e4))
            print(f"{label:>8} {per_week:>10,} {r.units:>11,} {r.anytime_miss:>8.1%} {r.fixed_miss:>13.1%} "
                  f"{r.fixed_last_miss:>11.1%}", flush=True)
    print()
    print("Coverage of 95% fixed-horizon intervals, 1,000 tests each (true lift 10% in conversion)")
    print(f"{'units':>8} {'raw':>6} {'CUPED':>6} {'mean variance reduction':>24}")
    for units in (2_000, 20_000, 100_000):
        c = coverage(tests=1_000, units=units, seed=units)
        print(f"{units:>8,} {c.raw:>6.1%} {c.cuped:>6.1%} {c.mean_variance_reduction:>24.1%}", flush=True)
    print(f"\n({time.time() - t0:.0f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
