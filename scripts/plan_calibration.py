"""Closing the planner's loop: simulate the designs `armlock plan` recommends as real tests, read as the readout reads.

For each scenario (small skewed shops, a mid shop, a large shop) the plan is made with the default grid; its
recommended design (holdout share, whole weeks) is then simulated as `--sims` tests with weekly cohorts of
new units, every order value drawn (no shortcut), read two ways:
  - fixed: Welch's t-test once at the planned end (scipy's t at the Welch-Satterthwaite df, as readout.stats);
  - weekly: the readout's anytime interval (readout.confseq.anytime_factor, tuned to the planned units) at every
    weekly look, for the plan's weekly-reading design (the same share, the plan's weeks when read weekly).
Two data-generating processes with the inputs' mean and SD: A is the plan's own zero-inflated lognormal; B has
half the buying share (heavier order-value tail), which the plan did not simulate. Under the target (power)
and under no effect (false wins). Prints a markdown table (docs/planner.md). Run it under nice:

    nice -n 10 python scripts/plan_calibration.py [--sims 2000]
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import stats

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.soundness import Shape, shape_of
from armlock.shared.confseq import anytime_factor

# name, weekly units, mean, SD, lift per reached unit, reach, max weeks, prefer
SCENARIOS = [
    ("small skewed shop, big target", 2_400, 7.0, 75.0, 1.50, 0.8, 8, "balanced"),
    ("small skewed shop, --prefer money", 5_000, 7.0, 75.0, 0.50, 0.8, 12, "money"),
    ("mid shop", 40_000, 7.0, 75.0, 0.12, 0.8, 12, "balanced"),
    ("large shop", 400_000, 7.0, 75.0, 0.05, 0.8, 12, "balanced"),
]


def heavier(s: Shape, mean: float, sd: float) -> Shape:
    """Process B: half the buying share, order values with the same revenue mean and SD (a heavier tail)."""
    return shape_of(mean, sd, conversion=s.p / 2)


def simulate(shape: Shape, weekly: int, share: float, weeks: int, diff: float, alpha: float, sims: int,
             seed: int) -> tuple[float, float]:
    """Rejection rates (Welch once at the end, anytime interval at every weekly look) over `sims` tests."""
    rng = np.random.default_rng(seed)
    n_h, n_e = round(share * weekly), weekly - round(share * weekly)
    v = math.exp(shape.mu + shape.sigma ** 2 / 2)
    q = (shape.p, shape.p + diff / v)
    sums = np.zeros((2, 2, sims))  # arm x (sum, sum of squares) x test
    t_opt = weekly * weeks
    any_rej = np.zeros(sims, dtype=bool)
    for k in range(weeks):
        for arm, n in ((0, n_h), (1, n_e)):
            buyers = rng.binomial(n, q[arm], sims)
            vals = rng.lognormal(shape.mu, shape.sigma, int(buyers.sum()))
            who = np.repeat(np.arange(sims), buyers)
            sums[arm, 0] += np.bincount(who, vals, sims)
            sums[arm, 1] += np.bincount(who, vals * vals, sims)
        nh, ne = n_h * (k + 1), n_e * (k + 1)
        mh, me = sums[0, 0] / nh, sums[1, 0] / ne
        vh = (sums[0, 1] - sums[0, 0] * mh) / (nh - 1) / nh
        ve = (sums[1, 1] - sums[1, 0] * me) / (ne - 1) / ne
        se = np.sqrt(vh + ve)
        d = me - mh
        any_rej |= np.abs(d) > anytime_factor(nh + ne, t_opt=t_opt, alpha=alpha) * se
    df = (vh + ve) ** 2 / (vh ** 2 / (nh - 1) + ve ** 2 / (ne - 1))
    fixed = np.abs(d / se) > stats.t.isf(alpha / 2, df)
    return float(fixed.mean()), float(any_rej.mean())


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sims", type=int, default=2000)
    args = ap.parse_args()
    n = args.sims
    print(f"{n:,} tests per cell; power and false wins of the readout's reading of the recommended design\n")
    print("| scenario | design | process | fixed: planned power (sim.) | observed | false wins | "
          "weekly: design | planned power | observed | false wins |")
    print("|---|---|---|---:|---:|---:|---|---:|---:|---:|")
    for name, W, mean, sd, lift, reach, max_weeks, prefer in SCENARIOS:
        t0 = time.time()
        x = PlanInputs(weekly_units=W, revenue_mean=mean, revenue_sd=sd, lift=lift, exposure_rate=reach)
        p = make_plan(x, max_weeks=max_weeks, prefer=prefer)
        rec = p.recommendation
        if rec.share is None or rec.weeks is None:
            print(f"| {name} | {rec.status}: no design | | | | | | | | |")
            continue
        s = p.summary(rec.share)
        diff = s.target_difference
        weekly_weeks = max(2, math.ceil(s.weeks_needed_weekly_reading - 1e-9))
        base = shape_of(mean, sd)
        for label, shape in (("A (plan's)", base), ("B (heavier tail)", heavier(base, mean, sd))):
            pw, _ = simulate(shape, W, rec.share, rec.weeks, diff, x.alpha, n, seed=1)
            fw, _ = simulate(shape, W, rec.share, rec.weeks, 0.0, x.alpha, n, seed=2)
            _, pw_w = simulate(shape, W, rec.share, weekly_weeks, diff, x.alpha, n, seed=3)
            _, fw_w = simulate(shape, W, rec.share, weekly_weeks, 0.0, x.alpha, n, seed=4)
            print(f"| {name} | {rec.share * 100:g}% for {rec.weeks} wk ({rec.share * W * rec.weeks:,.0f} holdout "
                  f"units) | {label} | 80% ({(s.power_simulated or 0) * 100:.1f}%) | {pw * 100:.1f}% | "
                  f"{fw * 100:.1f}% | {weekly_weeks} wk | 80% | {pw_w * 100:.1f}% | {fw_w * 100:.1f}% |", flush=True)
        print(f"<!-- {name}: {time.time() - t0:.0f} s -->", flush=True)


if __name__ == "__main__":
    main()
