"""Coverage of the relative-lift intervals (delta method, raw and CUPED) at a 10% holdout (docs/readout-decision.md).

    nice -n 10 python scripts/readout_relative_lift.py > readout_relative_lift.txt

2,000 simulated tests per row (readout/simulate.py, heavy-tailed revenue, true lift 10%), at three
sizes: the delta-method interval of the ratio of means with the holdout mean's own uncertainty
(raw and CUPED), and the former CUPED interval that took the holdout mean as known. Target 95 +/-
1.5%. The test suite runs a smaller version (tests/readout/test_method_fixes.py).
"""

from __future__ import annotations

import sys
import time

from armlock.readout.simulate import relative_coverage


def main() -> int:
    t0 = time.time()
    print("Coverage of 95% relative-lift intervals, 10% holdout, 2,000 tests each")
    print(f"{'units':>8} {'raw':>6} {'CUPED':>6} {'CUPED, holdout mean as known':>29}")
    for units in (5_000, 20_000, 100_000):
        c = relative_coverage(tests=2_000, units=units, holdout_share=0.1, seed=units + 1)
        print(f"{units:>8,} {c.raw:>6.1%} {c.cuped:>6.1%} {c.cuped_holdout_fixed:>29.1%}", flush=True)
    print(f"\n({time.time() - t0:.0f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
