"""The 2x2 readout of two concurrent holdouts: against statsmodels' OLS with an interaction term, and
the coverage of its intervals by simulation (a small version that can fail; scripts/calib_factorial.py
runs the large one)."""

from __future__ import annotations

import numpy as np
import pytest

from armlock.assign import Spec
from armlock.readout.factorial import cell_stats, two_holdouts, two_holdouts_from_units


def _revenue(rng: np.random.Generator, a: np.ndarray, b: np.ndarray, effects: tuple[float, float, float]) -> np.ndarray:
    """Zero-inflated, skewed revenue per unit (most units buy nothing; buyers' revenue is lognormal)
    with additive true effects of A, of B, and their interaction."""
    ea, eb, eab = effects
    buys = rng.random(len(a)) < 0.06
    y = np.where(buys, rng.lognormal(mean=3.5, sigma=1.0, size=len(a)), 0.0)
    return y + ea * a + eb * b + eab * (a & b)


def test_matches_statsmodels_ols_with_interaction_and_hc2() -> None:
    # Reference: statsmodels OLS of y on a, b and a:b with heteroskedasticity-consistent HC2 errors
    # (MacKinnon & White 1985, "Some heteroskedasticity-consistent covariance matrix estimators with
    # improved finite sample properties", J. Econometrics 29:305-325). For this saturated model the
    # coefficients are the cell-mean contrasts and HC2 gives sum(c^2 s^2 / n) exactly.
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(3)
    n = 5_000
    a, b = rng.random(n) < 0.9, rng.random(n) < 0.5
    y = _revenue(rng, a, b, (2.0, 1.0, -1.5))
    X = sm.add_constant(np.column_stack([a, b, a & b]).astype(float))
    fit = sm.OLS(y, X).fit(cov_type="HC2")
    res = two_holdouts(cell_stats(a, b, y), "A", "B", 0.9, 0.5)
    assert res is not None
    by = {c.label: c for c in res}
    a_only = by["A: effect where B holds out"]
    b_only = by["B: effect where A holds out"]
    inter = by["interaction (both exposed, beyond the two effects added)"]
    assert a_only.estimate == pytest.approx(fit.params[1], rel=1e-9)
    assert b_only.estimate == pytest.approx(fit.params[2], rel=1e-9)
    assert inter.estimate == pytest.approx(fit.params[3], rel=1e-9)
    assert a_only.se == pytest.approx(fit.bse[1], rel=1e-9)
    assert b_only.se == pytest.approx(fit.bse[2], rel=1e-9)
    assert inter.se == pytest.approx(fit.bse[3], rel=1e-9)
    assert inter.p == pytest.approx(fit.pvalues[3], rel=1e-6)
    # "A as B runs" is the combination (1 - pB) * a + pB * (a + a:b) of the same fit
    L = np.array([0, 1, 0, 0.5])
    t = fit.t_test(L)
    mix = by["A: effect as B runs"]
    assert mix.estimate == pytest.approx(float(t.effect[0]), rel=1e-9)
    assert mix.se == pytest.approx(float(t.sd[0, 0]), rel=1e-9)


def test_interval_coverage_by_simulation() -> None:
    """400 simulated pairs of tests (A: 20% holdout, B: 50%), 4,000 units, skewed revenue, true
    effects A +1.0, B +0.5, interaction -0.8 per unit: the 95% intervals of the interaction and of
    A's effect as B runs cover the truth in 92-98% of runs (binomial SE about 1.1 points)."""
    rng = np.random.default_rng(11)
    truth = {"interaction (both exposed, beyond the two effects added)": -0.8,
             "A: effect as B runs": 1.0 + 0.5 * -0.8, "B: effect where A holds out": 0.5}
    hits = dict.fromkeys(truth, 0)
    runs = 400
    for _ in range(runs):
        a, b = rng.random(4_000) < 0.8, rng.random(4_000) < 0.5
        res = two_holdouts(cell_stats(a, b, _revenue(rng, a, b, (1.0, 0.5, -0.8))), "A", "B", 0.8, 0.5)
        assert res is not None
        for c in res:
            if c.label in truth:
                hits[c.label] += c.lo <= truth[c.label] <= c.hi
    for label, h in hits.items():
        assert 0.92 <= h / runs <= 0.98, (label, h / runs)


def test_a_known_interaction_is_found_with_real_splits() -> None:
    """Two specs with independent salts split 200,000 invented ids by the frozen contract; a true
    interaction of -3 per unit (exposed to both, the second channel adds less) is found, and the
    interval holds it."""
    rng = np.random.default_rng(5)
    ids = [f"v{i:07d}" for i in range(200_000)]
    sa = Spec(name="retargeting", salt="salt-one", start="2026-01-05T00:00:00Z",
              arms=[{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}])
    sb = Spec(name="social", salt="salt-two", start="2026-01-05T00:00:00Z",
              arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
    from armlock.readout.factorial import exposed_flags

    a, b = exposed_flags(sa, ids), exposed_flags(sb, ids)
    y = _revenue(rng, a, b, (4.0, 3.0, -3.0))
    res = two_holdouts_from_units(sa, sb, ids, y)
    assert res is not None
    inter = res[-1]
    assert inter.hi < 0 and inter.lo <= -3.0 <= inter.hi and inter.p < 0.01
    assert two_holdouts_from_units(sa, sb, ids[:3], y[:3]) is None  # a cell under 2 units: cannot judge


def test_readout_alongside_a_concurrent_test(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """`armlock readout --alongside OTHER.toml`: the 2x2 section in text, and in JSON the cells and the
    seven effects on the shared units; orders of the invented shop come from audit.synth."""
    import json
    import re

    from armlock.assign import load_spec
    from armlock.audit import synth
    from tests.cli.cli_run import run_cli

    assert run_cli(tmp_path, "init", "retargeting", "--holdout-share", "0.2").returncode == 0
    assert run_cli(tmp_path, "init", "social", "--holdout-share", "0.5").returncode == 0
    for name in ("retargeting", "social"):
        p = tmp_path / f"{name}.toml"
        p.write_text(re.sub(r"(?m)^start = .*$", "start = 2026-01-05T00:00:00Z", p.read_text()))
    spec = load_spec(tmp_path / "retargeting.toml")
    logs = synth.generate(spec, units=6_000, days=21, seed=8)
    synth.write_logs(logs, tmp_path, fmt="csv")
    synth.write_orders(synth.generate_orders(spec, logs, days=21, seed=9), tmp_path, fmt="csv")
    args = ["readout", "--spec", "retargeting.toml", "--visits", "visits.csv", "--orders", "orders.csv",
            "--alongside", "social.toml"]
    r = run_cli(tmp_path, *args)
    assert r.returncode in (0, 1), r.stderr
    assert "Read together with social (6,000 shared units" in r.stdout
    assert "interaction (both exposed, beyond the two effects added)" in r.stdout
    j = run_cli(tmp_path, *args, "--format", "json")
    doc = json.loads(j.stdout)["two_holdouts"][0]
    assert doc["with_test"] == "social" and doc["shared_units"] == 6_000
    assert sum(c["units"] for c in doc["cells"]) == 6_000 and len(doc["effects"]) == 7
    holdout_both = next(c for c in doc["cells"] if c["this"] == "holdout" and c["other"] == "holdout")
    assert 0.06 < holdout_both["units"] / 6_000 < 0.14  # 20% x 50% = 10% of the units, by the contract
