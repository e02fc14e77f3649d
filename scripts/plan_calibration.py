"""Closing the planner's loop at full size: simulate >= 1,000 tests per scenario at the planned size and compare.

For each scenario (small, medium, large shops; with and without CUPED) the test is sized by `armlock.plan`
for 80% power at 8 weeks, then simulated with `armlock.plan.simulate` under the planned effect and under no
effect. Prints a markdown table (the README's figures). Run it under nice, it takes a few minutes:

    nice -n 10 python scripts/plan_calibration.py [--sims 1000]
"""

from __future__ import annotations

import argparse
import math
import time

from armlock.plan.compute import make_plan
from armlock.plan.model import PlanInputs
from armlock.plan.power import extra_variance, units_needed_two_variances, z_sum
from armlock.plan.simulate import simulate

WEEKS = 8
# name, revenue SD (mean 2.0), holdout share, exposure rate, lift per exposed unit, rho
SCENARIOS = [
    ("small shop, big lift", 4.0, 0.5, 0.5, 0.30, 0.0),
    ("medium shop", 10.0, 0.2, 0.8, 0.10, 0.0),
    ("large shop, CV 10", 20.0, 0.1, 0.6, 0.05, 0.0),
    ("medium shop, CUPED rho 0.5", 10.0, 0.3, 0.8, 0.10, 0.5),
]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sims", type=int, default=1000)
    args = ap.parse_args()
    mu = 2.0
    print("| scenario | units | planned power | observed, fixed at end | within 3 points | weekly reading: "
          "planned at least | observed | no effect: fixed at end | fixed read weekly | anytime read weekly |")
    print("|---|---:|---:|---:|:---:|---:|---:|---:|---:|---:|")
    for name, sd, h, e, lift, rho in SCENARIOS:
        t0 = time.time()
        diff, var = lift * mu * e, sd ** 2 * (1 - rho ** 2)  # sized by the planner: 80% power at WEEKS weeks
        z_a = z_sum(0.05, 0.5)  # z_(1-alpha/2) + z_0.5 = z_(1-alpha/2)
        var_e = var + extra_variance(diff, mu, sd)
        pooled = (var / h + var_e / (1 - h)) / (1 / h + 1 / (1 - h))  # Welch: one SE for both
        units = units_needed_two_variances(diff, pooled, var, var_e, h, z_crit=z_a, z_power=z_sum(0.05, 0.8) - z_a)
        x = PlanInputs(weekly_units=units / WEEKS, revenue_mean=mu, revenue_sd=sd, exposure_rate=e, lift=lift, rho=rho)
        plan = make_plan(x, shares=[h], weeks=[WEEKS])
        c = plan.cell(h, WEEKS)
        planned = c.power_at_target or 0.0
        weekly_planned = c.power_weekly_reading or 0.0
        alt = simulate(x, h, WEEKS, effect_per_exposed=lift * mu, sims=args.sims, seed=11)
        null = simulate(x, h, WEEKS, effect_per_exposed=0.0, sims=args.sims, seed=12)
        obs = alt.cuped_end if rho else alt.fixed_end
        se = math.sqrt(obs * (1 - obs) / args.sims)
        ok = "yes" if abs(obs - planned) <= 0.03 else "NO"
        fmt = lambda v: "n/a" if v is None or v != v else f"{v * 100:.1f}%"  # noqa: E731
        print(f"| {name} | {units:,.0f} | {planned * 100:.1f}% | {obs * 100:.1f}% (SE {se * 100:.1f}) | {ok} | "
              f"{fmt(None if rho else weekly_planned)} | {fmt(None if rho else alt.anytime_any_week)} | "
              f"{fmt(null.cuped_end if rho else null.fixed_end)} | {fmt(null.fixed_any_week)} | "
              f"{fmt(null.anytime_any_week)} |", flush=True)
        print(f"<!-- {name}: {time.time() - t0:.0f} s -->", flush=True)


if __name__ == "__main__":
    main()
