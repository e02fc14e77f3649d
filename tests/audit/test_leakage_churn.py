"""Leakage's ITT dilution and churn's re-randomization expectation, by hand and against simulation."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import assign_many, spec_from_dict
from armlock.audit.churn import expected_multi_arm
from armlock.audit.leakage import itt_dilution
from armlock.audit.render import check_by_id
from armlock.audit.run import run_audit


def test_itt_dilution_is_the_exposure_rate_gap() -> None:
    # Angrist, Imbens & Rubin (1996), JASA 91(434): ITT_Y = CACE * (E[D|Z=1] - E[D|Z=0]) (the Wald
    # ratio, REFERENCES.md §7). With 60% exposure in the exposed arm and 2% leakage into the holdout,
    # the ITT difference is 58% of the per-exposed effect.
    assert itt_dilution(0.60, 0.02) == pytest.approx(0.58)
    # simulated check: per-exposed effect 1.0, ITT difference of means = 0.58
    rng = np.random.default_rng(0)
    n = 400_000
    z = rng.random(n) < 0.5
    d = np.where(z, rng.random(n) < 0.60, rng.random(n) < 0.02)
    y = rng.normal(0, 1, n) + 1.0 * d
    itt = y[z].mean() - y[~z].mean()
    assert itt == pytest.approx(itt_dilution(d[z].mean(), d[~z].mean()), abs=0.015)


def test_expected_multi_arm_by_hand() -> None:
    # Common practice (independent re-hashing): a customer with k ids stays in one arm with
    # probability sum_i theta_i^k. 50/50, k=2: 1 - 0.5 = 0.5; 90/10, k=2: 1 - 0.81 - 0.01 = 0.18;
    # 90/10, k=3: 1 - 0.729 - 0.001 = 0.27.
    assert expected_multi_arm([2], [0.5, 0.5]) == pytest.approx(0.5)
    assert expected_multi_arm([2, 3, 1], [0.9, 0.1]) == pytest.approx(0.18 + 0.27 + 0.0)


def test_churn_check_against_direct_count(tmp_path: Path) -> None:
    spec = spec_from_dict({"name": "c", "salt": "churn-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}],
                           "audit": {"segments": [], "covariates": [], "categorical_covariates": []}})
    rng = np.random.default_rng(1)
    n = 6000
    ids = [f"id-{i}" for i in range(n)]
    arms = assign_many(spec, ids)
    cust = [f"cust-{c}" for c in rng.integers(0, 2500, n)]  # ~2.4 ids per customer
    visits = pd.DataFrame({"unit_id": ids, "first_seen": "2026-01-06T12:00:00Z", "arm": arms,
                           "browser_family": rng.choice(["webkit", "gecko"], n)})
    links = pd.DataFrame({"unit_id": ids, "customer_key": cust})
    visits.to_csv(tmp_path / "v.csv", index=False)
    links.to_csv(tmp_path / "i.csv", index=False)
    rep = run_audit(spec, visits=tmp_path / "v.csv", identities=tmp_path / "i.csv")
    churn = check_by_id(rep, "churn")
    per = pd.DataFrame({"c": cust, "a": arms}).groupby("c")["a"].nunique()
    assert churn.figures["customers"].value == len(per)
    assert churn.figures["multi_arm_customers"].value == int((per > 1).sum())
    k = pd.Series(cust).value_counts().to_numpy()
    assert churn.figures["expected_share"].value == pytest.approx(expected_multi_arm(k, [0.2, 0.8]) / len(per))
    # independent hashing: observed close to expected
    assert churn.figures["multi_arm_share"].value == pytest.approx(churn.figures["expected_share"].value, abs=0.03)
    assert churn.status == "fail"  # ~ 40% of customers in several arms
