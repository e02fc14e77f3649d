"""Independence of two concurrent splits: the chi-square cross-tab, its calibration, and the audit option."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from tests.cli.cli_run import run_cli
from tests.cli.test_audit_cli import SPEC_TOML

from armlock.assign import Spec, load_spec
from armlock.audit.overlap import INDEPENDENCE_P, CrossTab, check_independence, crosstab, independence_p
from armlock.audit.synth import generate, write_logs


def _spec(name: str, salt: str, holdout: int = 1000) -> Spec:
    return Spec(name=name, salt=salt, start="2026-01-05T00:00:00Z",
                arms=[{"name": "holdout", "weight": holdout}, {"name": "exposed", "weight": 10_000 - holdout}])


def test_two_by_two_matches_the_closed_form() -> None:
    # Pearson's X^2 for a 2x2 table, n (ad - bc)^2 / ((a+b)(c+d)(a+c)(b+d)), 1 df (Pearson 1900; any
    # textbook, e.g. Agresti 2013, "Categorical Data Analysis", 3rd ed., section 3.2) - no continuity
    # correction, as scipy.stats.chi2_contingency(correction=False).
    a, b, c, d = 180, 1820, 230, 1770
    n = a + b + c + d
    x2 = n * (a * d - b * c) ** 2 / ((a + b) * (c + d) * (a + c) * (b + d))
    res = independence_p(np.array([[a, b], [c, d]]))
    assert res is not None
    assert res[0] == pytest.approx(x2, rel=1e-12)
    assert res[1] == pytest.approx(stats.chi2.sf(x2, 1), rel=1e-10)
    assert res[2] == 1
    ref = stats.chi2_contingency([[a, b], [c, d]], correction=False)
    assert res[1] == pytest.approx(ref.pvalue, rel=1e-12)
    assert independence_p(np.array([[5, 0], [7, 0]])) is None  # one column empty: nothing to test


def test_copied_salt_nests_the_arms_exactly_and_fails() -> None:
    ids = [f"v{i:06d}" for i in range(20_000)]
    a = _spec("retargeting", "shared-salt")
    t = crosstab(a, _spec("social", "shared-salt"), ids)
    assert t.same_salt and t.counts[0, 1] == 0 and t.counts[1, 0] == 0  # holdout inside holdout
    c = check_independence(a, [t])
    assert c.status == "fail" and "same salt as social" in c.summary
    # same salt, other weights: a 10% holdout inside a 20% one - nested, fails on the p-value too
    t2 = crosstab(a, _spec("social", "shared-salt", holdout=2000), ids)
    assert t2.counts[0, 1] == 0 and independence_p(t2.counts)[1] < 1e-100  # type: ignore[index]


def test_false_alarms_of_independent_salts_at_weekly_looks() -> None:
    """200 pairs of random salts, 3,000 shared units arriving over 6 weekly looks (a calibration that
    can fail): the p-values at the last look are uniform (Kolmogorov-Smirnov), and no pair alarms at
    INDEPENDENCE_P at any look (expected alarms: 200 * 6 * 1e-4 = 0.12)."""
    rng = np.random.default_rng(7)
    ids = [f"id-{rng.bytes(6).hex()}" for _ in range(3_000)]  # arbitrary ids; the salts carry the randomness
    week = rng.integers(0, 6, size=len(ids))
    last_p, alarms = [], 0
    for _ in range(200):
        a = _spec("a", rng.bytes(12).hex(), holdout=1000)
        b = _spec("b", rng.bytes(12).hex(), holdout=5000)
        from armlock.assign import assign_many

        ha = np.array([x == "holdout" for x in assign_many(a, ids)])
        hb = np.array([x == "holdout" for x in assign_many(b, ids)])
        for w in range(6):
            m = week <= w
            tab = np.array([[np.sum(ha[m] & hb[m]), np.sum(ha[m] & ~hb[m])],
                            [np.sum(~ha[m] & hb[m]), np.sum(~ha[m] & ~hb[m])]])
            p = independence_p(tab)[1]  # type: ignore[index]
            alarms += p < INDEPENDENCE_P
        last_p.append(p)
    assert alarms == 0
    assert stats.kstest(last_p, "uniform").pvalue > 0.001


def test_cannot_judge_and_apart() -> None:
    a = _spec("a", "s1")
    few = CrossTab("b", "b.toml", False, ["holdout", "exposed"], ["holdout", "exposed"], np.array([[0, 3], [2, 30]]))
    c = check_independence(a, [few])
    assert c.status == "warn" and c.summary.startswith("Cannot judge: too few shared units with b")
    none = CrossTab("b", "b.toml", False, ["holdout", "exposed"], ["holdout", "exposed"], np.zeros((2, 2), int))
    c = check_independence(a, [none])
    assert c.status == "skipped" and "nothing to compare" in c.summary


@pytest.fixture(scope="module")
def portfolio(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("portfolio")
    (d / "specs").mkdir()
    (d / "specs" / "main.toml").write_text(SPEC_TOML, encoding="utf-8")
    write_logs(generate(load_spec(d / "specs" / "main.toml"), units=6_000, days=21, seed=4), d / "logs", "csv")
    other = SPEC_TOML.replace('name = "cli-audit"', 'name = "social"').replace("cli-audit-salt", "social-salt")
    (d / "specs" / "social.toml").write_text(other, encoding="utf-8")
    return d


def test_audit_alongside_a_folder(portfolio: Path, tmp_path: Path) -> None:
    args = ["audit", "--spec", "specs/main.toml", "--visits", "logs/visits.csv", "--format", "json"]
    r = run_cli(portfolio, *args, "--alongside", "specs")
    assert r.returncode == 0, r.stderr
    import json

    check = {c["id"]: c for c in json.loads(r.stdout)["checks"]}["independence"]
    assert check["status"] == "pass" and check["figures"]["shared_units"]["value"] == 6_000
    copy = tmp_path / "copy.toml"  # a copy of the spec under another name: same salt
    copy.write_text(SPEC_TOML.replace('name = "cli-audit"', 'name = "copied"'), encoding="utf-8")
    r = run_cli(portfolio, *args, "--alongside", "specs/social.toml", "--alongside", str(copy))
    assert r.returncode == 3
    check = {c["id"]: c for c in json.loads(r.stdout)["checks"]}["independence"]
    assert check["status"] == "fail" and "same salt as copied" in check["summary"]
    assert r.stderr.splitlines()[-1].endswith("failing: independence")
