"""SRM calibration: A/A false-fail rates over 26 weekly audits, power against seeded skews, tiny arms, segment FWER.

Everything is simulated from the sufficient statistics the checks read (counts per arm per day or
per cell), drawn as multinomials, so 10,000 tests x 182 daily counts cost seconds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from armlock.assign import spec_from_dict
from armlock.audit.srm import check_srm_segments, exact_srm_p, holm, sequential_p
from armlock.shared.tables import SplitTables

WEEKS, DAYS = 26, 182
LEVEL_ANYTIME, LEVEL_FIXED = 0.001, 0.0005  # the spec's default srm_anytime_p and srm_p


def daily_counts(rng: np.random.Generator, reps: int, n: int, theta: np.ndarray) -> np.ndarray:
    """(reps, DAYS, k) new units per arm per day: n units over 26 weeks, evenly spread, arms drawn by theta."""
    per_day = rng.multinomial(n, [1 / DAYS] * DAYS, size=reps)
    out = np.empty((reps, DAYS, len(theta)), dtype=np.int64)
    rest = per_day.copy()
    left = 1.0
    for i, t in enumerate(theta[:-1]):
        out[..., i] = rng.binomial(rest, min(1.0, t / left))
        rest -= out[..., i]
        left -= t
    out[..., -1] = rest
    return out


def weekly_verdicts(n: int, theta0: np.ndarray, theta_true: np.ndarray, reps: int, seed: int,
                    chunk: int = 2000) -> dict[str, float]:
    """Share of tests that fail at any of the 26 weekly audits (the check: anytime-valid p, running minimum
    over the days), and for contrast, the old rule (also failing on the fixed chi-square at any weekly audit)."""
    rng = np.random.default_rng(seed)
    fail_any = fail_old = 0
    first_week = []
    for start in range(0, reps, chunk):
        m = min(chunk, reps - start)
        cum = daily_counts(rng, m, n, theta_true).cumsum(axis=1)
        p_any = sequential_p(cum, theta0)  # (m, DAYS) running minimum
        weekly_p = p_any[:, 6::7]
        failed = weekly_p < LEVEL_ANYTIME
        fail_any += int(failed[:, -1].sum())
        wk = cum[:, 6::7, :]
        tot = wk.sum(axis=-1, keepdims=True)
        exp = tot * theta0
        chi2 = ((wk - exp) ** 2 / np.where(exp > 0, exp, 1)).sum(axis=-1)
        p_fixed = stats.chi2.sf(chi2, len(theta0) - 1)
        fail_old += int(((p_fixed < LEVEL_FIXED) | failed).any(axis=1).sum())
        hit = failed.any(axis=1)
        first_week += list(np.argmax(failed[hit], axis=1) + 1)
    return {"fail": fail_any / reps, "fail_old_rule": fail_old / reps,
            "median_week_caught": float(np.median(first_week)) if first_week else float("nan")}


def tiny_arm(n: int, reps: int, seed: int) -> dict[str, float]:
    """A 1 bp arm at n units, one audit: false-fail of the check (anytime-valid) and of a chi-square at 0.0005."""
    theta = np.array([0.0001, 0.9999])
    rng = np.random.default_rng(seed)
    x = rng.binomial(n, theta[0], size=reps)
    cum = np.stack([x, n - x], axis=-1)[:, None, :]
    p_any = sequential_p(cum, theta)[:, -1]
    exp = n * theta
    chi2 = ((x - exp[0]) ** 2 / exp[0] + (n - x - exp[1]) ** 2 / exp[1])
    p_exact = exact_srm_p(np.stack([x, n - x], axis=-1), theta)
    return {"fail": float((p_any < LEVEL_ANYTIME).mean()),
            "chi_square_below_level": float((stats.chi2.sf(chi2, 1) < LEVEL_FIXED).mean()),
            "exact_below_level": float((p_exact < LEVEL_FIXED).mean())}


def segment_fwer_cells(reps: int, seed: int, level: float, cells: int = 60, n: int = 3000,
                       holdout: float = 0.1, chunk: int = 20_000) -> dict[str, float]:
    """FWER of Holm over `cells` equal cells (about 5 expected holdout units each), exact vs chi-square p."""
    theta = np.array([holdout, 1 - holdout])
    rng = np.random.default_rng(seed)
    hits_exact = hits_chi = 0
    for start in range(0, reps, chunk):
        m = min(chunk, reps - start)
        size = rng.multinomial(n, [1 / cells] * cells, size=m)
        h = rng.binomial(size, holdout)
        counts = np.stack([h, size - h], axis=-1)
        keep = (size * theta.min()) >= 5.0  # the check's min_expected rule
        p_exact = np.where(keep, exact_srm_p(counts.reshape(-1, 2), theta).reshape(m, cells), 1.0)
        exp = size[..., None] * theta
        chi2 = ((counts - exp) ** 2 / np.where(exp > 0, exp, 1)).sum(axis=-1)
        p_chi = np.where(keep, stats.chi2.sf(chi2, 1), 1.0)
        hits_exact += sum(bool((holm(r) < level).any()) for r in p_exact)
        hits_chi += sum(bool((holm(r) < level).any()) for r in p_chi)
    return {"fwer_exact": hits_exact / reps, "fwer_chi_square": hits_chi / reps}


SEGMENTS = {"browser_family": [0.62, 0.26, 0.06, 0.06], "device": [0.58, 0.36, 0.06],
            "country": [0.38, 0.16, 0.14, 0.10, 0.08, 0.05, 0.05, 0.04],
            "landing_channel": [0.34, 0.22, 0.16, 0.10, 0.10, 0.08]}


def _tab(codes: np.ndarray, arm: np.ndarray, labels: list[str]) -> pd.DataFrame:
    k = len(labels)
    flat = np.bincount(codes * 2 + arm, minlength=2 * k).reshape(k, 2)
    return pd.DataFrame(flat, index=pd.Index(labels, name="level"), columns=["holdout", "exposed"])


def segment_check_runs(reps: int, seed: int, n: int = 3000, holdout_bp: int = 1000, days: int = 28,
                       skew_level: str | None = None) -> dict[str, float]:
    """The check itself (check_srm_segments) on the invented shop's layout: first-seen days and four
    segment columns; optionally the holdout loses 30% of one browser family's units."""
    spec = spec_from_dict({"name": "c", "salt": "s", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": holdout_bp},
                                    {"name": "exposed", "weight": 10_000 - holdout_bp}]})
    rng = np.random.default_rng(seed)
    fails = warns = 0
    dates = pd.date_range("2026-01-05", periods=days, freq="D").strftime("%Y-%m-%d")
    for _ in range(reps):
        arm = (rng.random(n) >= holdout_bp / 10_000).astype(np.int64)
        cols = {s: rng.choice(len(p), size=n, p=p) for s, p in SEGMENTS.items()}
        keep = np.ones(n, bool)
        if skew_level is not None:
            keep &= ~((arm == 0) & (cols["browser_family"] == 1) & (rng.random(n) < 0.3))
        day = rng.integers(0, days, n)
        a = arm[keep]
        daily = _tab(day[keep], a, list(dates))
        segs = {s: _tab(cols[s][keep], a, [f"{s}{i}" for i in range(len(p))]) for s, p in SEGMENTS.items()}
        split = SplitTables(arms=["holdout", "exposed"], units={"holdout": int((a == 0).sum()),
                                                                "exposed": int((a == 1).sum())},
                            daily=daily, segments=segs)
        st = check_srm_segments(spec, split).status
        fails += st == "fail"
        warns += st == "warn"
    return {"fail": fails / reps, "warn": warns / reps}
