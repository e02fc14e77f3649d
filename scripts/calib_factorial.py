"""Coverage of the 2x2 readout's 95% intervals (readout/factorial.py) by simulation.

Two holdouts (A: 20% held out, B: 50%) share N units; revenue per unit is zero-inflated and
skewed (6% buy, lognormal order values, mean about 3.3 per unit), with true effects A +1.0, B +0.5
and interaction -0.8 per unit (null case: all 0). Reported: how often each 95% interval covers its
true value, and how often the interaction's interval excludes 0 (power; false alarms when null).

Run: nice python scripts/calib_factorial.py [runs]   (about a minute)
"""

from __future__ import annotations

import sys

import numpy as np

from armlock.readout.factorial import cell_stats, two_holdouts

LABELS = {"A: effect as B runs": "A as B runs", "B: effect as A runs": "B as A runs",
          "interaction (both exposed, beyond the two effects added)": "interaction"}


def main() -> None:
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    rng = np.random.default_rng(20261205)
    print("| units | truth | runs | cover: A as B runs | cover: B as A runs | cover: interaction | interaction excludes 0 |")
    print("|---:|---|---:|---:|---:|---:|---:|")
    for n in (2_000, 20_000, 200_000):
        for name, (ea, eb, eab) in (("null", (0.0, 0.0, 0.0)), ("A +1, B +0.5, AxB -0.8", (1.0, 0.5, -0.8))):
            truth = {"A as B runs": ea + 0.5 * eab, "B as A runs": eb + 0.8 * eab, "interaction": eab}
            cover = dict.fromkeys(truth, 0)
            excl = 0
            k = runs if n < 200_000 else max(runs // 5, 1)
            for _ in range(k):
                a, b = rng.random(n) < 0.8, rng.random(n) < 0.5
                buys = rng.random(n) < 0.06
                y = np.where(buys, rng.lognormal(3.5, 1.0, n), 0.0) + ea * a + eb * b + eab * (a & b)
                res = two_holdouts(cell_stats(a, b, y), "A", "B", 0.8, 0.5)
                assert res is not None
                for c in res:
                    key = LABELS.get(c.label)
                    if key:
                        cover[key] += c.lo <= truth[key] <= c.hi
                        if key == "interaction":
                            excl += not (c.lo <= 0 <= c.hi)
            print(f"| {n:,} | {name} | {k:,} | " + " | ".join(f"{cover[x] / k:.3f}" for x in truth)
                  + f" | {excl / k:.3f} |", flush=True)


if __name__ == "__main__":
    main()
