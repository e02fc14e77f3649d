"""How often the audit is wrong: A/A false alarms and power of the SRM and balance checks, by simulation.

Run from the repository root (2 shared cores: be nice):

    nice -n 10 python scripts/calibrate_audit.py            # the figures of docs/calibration.md (about half an hour)
    nice -n 10 python scripts/calibrate_audit.py --quick    # a smoke run, a minute or two

Prints markdown tables (pasted into docs/calibration.md, "How often the audit is wrong") and, with
--out FILE, writes the figures as JSON. Seeds are fixed, so a rerun gives the same figures.
"""

from __future__ import annotations

import argparse
import json
import math
import time
from pathlib import Path

import numpy as np

import calib_balance as cb
import calib_srm as cs
from armlock.audit.balance import sample_variance, smd_continuous
from armlock.shared.engine_pandas import numeric_moments
from armlock.audit.srm import detectable_shortfall

SIZES = (1_000, 5_000, 20_000, 100_000, 1_000_000)
LAYOUTS = {"50/50": np.array([0.5, 0.5]), "90/10": np.array([0.1, 0.9])}  # holdout first


def skewed(theta: np.ndarray, shortfall: float) -> np.ndarray:
    """The holdout's share `shortfall` (relative) below its weight; the other arm gets the rest."""
    t = theta.copy()
    t[0] = theta[0] * (1 - shortfall)
    t[1] = 1 - t[0]
    return t


def ratio_skew(theta: np.ndarray, ratio: float) -> np.ndarray:
    """exposed/holdout = ratio x its designed value."""
    r = theta[1] / theta[0] * ratio
    return np.array([1 / (1 + r), r / (1 + r)])


def shortfall(n: int, theta: np.ndarray) -> str:
    seen = detectable_shortfall(n, theta, cs.LEVEL_ANYTIME)
    return "-" if seen is None else f"{100 * seen[1]:.1f}%"


def pct(x: float) -> str:
    return f"{100 * x:.2f}%" if x >= 0.0001 or x == 0 else f"{100 * x:.3f}%"


def srm_section(quick: bool) -> tuple[list[str], dict]:
    reps_null = 1_000 if quick else 10_000
    reps_alt = 200 if quick else 2_000
    out: dict = {}
    lines = ["| units by week 26 | layout | A/A false fail (26 audits) | old rule (either test) | "
             "power: holdout share 1% low | power: 5% low | power: exposed/holdout ratio x1.01 | "
             "shortfall caught 99% (the check's own figure) |",
             "|---:|---|---:|---:|---:|---:|---:|---:|"]
    for n in SIZES:
        for name, th in LAYOUTS.items():
            seed = n // 1000 + (7 if name == "90/10" else 0)
            null = cs.weekly_verdicts(n, th, th, reps_null, seed)
            p1 = cs.weekly_verdicts(n, th, skewed(th, 0.01), reps_alt, seed + 1)
            p5 = cs.weekly_verdicts(n, th, skewed(th, 0.05), reps_alt, seed + 2)
            pr = cs.weekly_verdicts(n, th, ratio_skew(th, 1.01), reps_alt, seed + 3)
            out[f"{n}:{name}"] = {"null": null, "share_1pct": p1, "share_5pct": p5, "ratio_1.01": pr}
            lines.append(f"| {n:,} | {name} | {pct(null['fail'])} | {pct(null['fail_old_rule'])} | "
                         f"{pct(p1['fail'])} | {pct(p5['fail'])} | {pct(pr['fail'])} | {shortfall(n, th)} |")
            print(lines[-1], flush=True)
    lines.append("")
    lines.append(f"A/A: {reps_null:,} simulated tests per row; power: {reps_alt:,} per cell.")
    tiny = {n: cs.tiny_arm(n, 20_000 if quick else 200_000, n) for n in (2_000, 20_000)}
    out["tiny_arm"] = tiny
    lines += ["", "| 1 bp arm, units | check false fail (level 0.1%) | chi-square p < 0.0005 | exact p < 0.0005 |",
              "|---:|---:|---:|---:|"]
    for n, r in tiny.items():
        lines.append(f"| {n:,} | {pct(r['fail'])} | {pct(r['chi_square_below_level'])} | {pct(r['exact_below_level'])} |")
    return lines, out


def segment_section(quick: bool) -> tuple[list[str], dict]:
    reps_cells = 20_000 if quick else 200_000
    reps_check = 500 if quick else 5_000
    out = {"cells_0.0005": cs.segment_fwer_cells(reps_cells, 11, 0.0005),
           "cells_0.05": cs.segment_fwer_cells(reps_cells // 4, 12, 0.05),
           "check_null": cs.segment_check_runs(reps_check, 13),
           "check_browser_loss": cs.segment_check_runs(max(100, reps_check // 10), 14, n=20_000, skew_level="webkit")}
    c1, c2 = out["cells_0.0005"], out["cells_0.05"]
    lines = ["| design | runs | family-wise error, exact p (Holm) | same with chi-square p |",
             "|---|---:|---:|---:|",
             f"| 60 cells x 50 units, 10% holdout, level 0.05% | {reps_cells:,} | {pct(c1['fwer_exact'])} | "
             f"{pct(c1['fwer_chi_square'])} |",
             f"| same, level 5% (resolution check) | {reps_cells // 4:,} | {pct(c2['fwer_exact'])} | "
             f"{pct(c2['fwer_chi_square'])} |",
             "",
             f"The check itself on 3,000 units, 10% holdout, 28 first-seen days and the four default segment "
             f"columns, {reps_check:,} A/A runs: fails {pct(out['check_null']['fail'])}, warns "
             f"{pct(out['check_null']['warn'])}. With 30% of one browser family's holdout units lost at 20,000 "
             f"units: fails {pct(out['check_browser_loss']['fail'])} of {max(100, reps_check // 10):,} runs."]
    return lines, out


def balance_section(quick: bool) -> tuple[list[str], dict]:
    runs = 100 if quick else 1_000
    out: dict = {}
    lines = ["| units | holdout | A/A warn | A/A fail | cannot judge (warns) |", "|---:|---:|---:|---:|---:|"]
    for n in (400, 1_000, 5_000, 20_000, 100_000):
        for bp in (5_000, 1_000):
            r = cb.run(n, bp, runs, seed=n + bp)
            out[f"{n}:{bp}"] = r
            lines.append(f"| {n:,} | {bp / 100:.0f}% | {pct(r['warn'])} | {pct(r['fail'])} | {pct(r['cannot_judge'])} |")
            print(lines[-1], flush=True)
    lines += ["", f"{runs:,} runs per row (engine tables checked against the fast re-split tables: largest relative "
              f"difference {cb.self_check():.1e}).", "",
              "| seeded imbalance | units | holdout | caught (warn or fail) | fail |", "|---|---:|---:|---:|---:|"]
    pruns = 30 if quick else 200
    for cov in ("pre_revenue", "pre_orders"):
        for bp in (5_000, 1_000):
            r = cb.run(100_000, bp, pruns, seed=bp + 99, shift_sd=0.1, shift_cov=cov)
            out[f"power:{cov}:{bp}"] = r
            lines.append(f"| {cov} + 0.1 SD in the exposed arm | 100,000 | {bp / 100:.0f}% | "
                         f"{pct(r['warn'] + r['fail'])} | {pct(r['fail'])} |")
            print(lines[-1], flush=True)
    lines.append(f"\n{pruns:,} runs per row.")
    return lines, out


def numerics_section() -> tuple[list[str], dict]:
    rng = np.random.default_rng(1)
    x = 1e9 + rng.normal(0, 1, 100_000)
    arm = rng.integers(0, 2, len(x))
    rows = numeric_moments(x, arm, 2)
    v = [sample_variance(int(r["n"]), float(r["m2"])) for r in rows]
    ours = smd_continuous(float(rows[1]["mean"]), v[1], float(rows[0]["mean"]), v[0])
    a, b = x[arm == 1], x[arm == 0]
    ref = (a.mean() - b.mean()) / math.sqrt((a.var(ddof=1) + b.var(ddof=1)) / 2)
    err = abs(ours - ref)
    return [f"1e9 + N(0, 1), 100,000 units: SMD {ours:.12f}, numpy on the raw values {ref:.12f}, "
            f"difference {err:.1e}."], {"smd": ours, "numpy": ref, "abs_diff": err}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="few runs: a smoke test of the script")
    ap.add_argument("--only", default="srm,segments,balance,numerics", help="comma-separated sections")
    ap.add_argument("--out", type=Path, help="write the figures as JSON here")
    args = ap.parse_args()
    sections = {"srm": srm_section, "segments": segment_section, "balance": balance_section}
    figures: dict = {}
    for name in args.only.split(","):
        t0 = time.time()
        lines, figs = numerics_section() if name == "numerics" else sections[name](args.quick)
        figures[name] = figs
        print(f"\n### {name} ({time.time() - t0:.0f} s)\n")
        print("\n".join(lines), flush=True)
    if args.out:
        args.out.write_text(json.dumps(figures, indent=1, default=float), encoding="utf-8")


if __name__ == "__main__":
    main()
