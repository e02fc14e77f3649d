"""The decision (pays / does not pay / not yet known): the rule, its basis by look, the gate, calibration."""

from __future__ import annotations

import json
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps

from armlock.assign import spec_from_dict
from armlock.audit import synth
from armlock.readout.decision import MIN_BUYERS, breakeven, decide, p_against, stage
from armlock.readout.model import Interval
from armlock.readout.render import RENDERERS
from armlock.readout.run import run_readout
from armlock.readout.simulate import false_pays

DAYS = 56
EARLY = date(2026, 1, 25)  # the third weekly look of a test started 2026-01-05


def _spec(**readout: object):
    return spec_from_dict({"name": "shop", "salt": "decision-salt", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}],
                           "readout": {"covariates": ["pre_orders"], **readout}})


@pytest.fixture(scope="module")
def shop(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict[str, Path], dict[str, float]]:
    """Invented logs (audit/synth.py) of 20,000 units over 8 weeks; the channel doubles reached units' orders."""
    tmp = tmp_path_factory.mktemp("decision")
    spec = _spec(planned_units=20_000)
    logs = synth.generate(spec, units=20_000, days=DAYS, seed=5)
    orders = synth.generate_orders(spec, logs, days=DAYS, seed=6, uplift=1.0, base_rate=0.08)
    paths = synth.write_logs(logs, tmp, fmt="parquet")
    paths["orders"] = synth.write_orders(orders, tmp, fmt="parquet")
    return paths, orders.truth


def _spend_file(path: Path, total: float) -> Path:
    """The same amount every day of the test, so spend up to any as-of is the days so far."""
    days = pd.date_range("2026-01-05", periods=DAYS, freq="D")
    pd.DataFrame({"day": days.strftime("%Y-%m-%d"), "amount": total / DAYS, "campaign": "c1"}).to_csv(path, index=False)
    return path


@pytest.mark.parametrize("times_breakeven, at_end", [(3.0, "pays"), (0.3, "does_not_pay")])
def test_known_iroas_on_either_side_of_breakeven_early_and_at_the_planned_end(
        shop: tuple[dict[str, Path], dict[str, float]], tmp_path: Path, times_breakeven: float, at_end: str) -> None:
    paths, truth = shop
    spec = _spec(planned_units=20_000)
    target, _ = breakeven(spec)
    spend = truth["incremental_revenue"] / (times_breakeven * target)  # true iROAS = times_breakeven x break-even
    sf = _spend_file(tmp_path / "spend.csv", spend)
    common = dict(visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"],
                  identities=paths["identities"], spend_file=sf)
    end = run_readout(spec, **common)
    d = end.decision
    assert end.trustworthy and d.final_look and d.basis == "fixed"
    assert d.answer == at_end, d.reason
    assert (d.lo, d.hi) == (end.money.iroas.lo, end.money.iroas.hi)
    assert d.p_breakeven is not None and d.p_breakeven < 0.05
    early = run_readout(spec, as_of=EARLY, **common)
    e = early.decision
    assert e.basis == "anytime" and not e.final_look and e.p_breakeven is None
    assert (e.lo, e.hi) == (early.money.iroas.anytime_lo, early.money.iroas.anytime_hi)
    wrong = "does_not_pay" if at_end == "pays" else "pays"
    assert e.answer != wrong
    assert "before the planned size" in e.reason
    # first in every output, on the same interval
    assert RENDERERS["text"](early).startswith("Does the channel pay? ")
    assert early.headline.startswith(("Pays:", "Does not pay:", "Not yet known:"))
    assert "anytime interval" in early.headline and "fixed" not in early.headline
    data = json.loads(RENDERERS["json"](end))
    assert next(iter(data)) == "decision" and data["decision"]["answer"] == at_end
    assert data["decision"]["basis"] == "fixed" and data["decision"]["breakeven_iroas"] == pytest.approx(1 / 0.3)
    # the history keeps the anytime interval every week, the fixed one and p only at the final look
    assert "iroas_anytime_lo" in early.figures and "p" not in early.figures and "iroas_lo" not in early.figures
    assert end.figures["decision"].value == at_end and "p" in end.figures and "iroas_lo" in end.figures


def test_a_failing_gate_withholds_the_answer(tmp_path: Path) -> None:
    spec = _spec(planned_units=8_000)
    logs = synth.generate(spec, units=8_000, days=DAYS, seed=9, faults=("leakage",))
    orders = synth.generate_orders(spec, logs, days=DAYS, seed=10, uplift=1.0, base_rate=0.08)
    paths = synth.write_logs(logs, tmp_path, fmt="parquet")
    paths["orders"] = synth.write_orders(orders, tmp_path, fmt="parquet")
    rep = run_readout(spec, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"], spend=10.0)
    assert not rep.trustworthy
    assert rep.decision.answer == "not_yet_known" and rep.decision.withheld
    assert "withheld" in rep.decision.reason and "Leakage" in rep.decision.reason
    assert rep.figures["gate_failed"].value == "leakage"
    assert "WITHHELD" in RENDERERS["text"](rep).splitlines()[0].upper()


def test_target_iroas_replaces_breakeven() -> None:
    assert breakeven(_spec())[0] == pytest.approx(1 / 0.3)
    assert breakeven(_spec(margin=0.5))[0] == pytest.approx(2.0)
    assert breakeven(_spec(target_iroas=4.5)) == (4.5, "the spec's target iROAS 4.5")


def test_the_planned_final_look_is_the_first_that_reaches_the_plan() -> None:
    spec = _spec(planned_units=1000)
    assert not stage(spec, units=999, as_of=date(2026, 2, 1)).final
    assert stage(spec, units=1000, as_of=date(2026, 2, 1), earlier=[(date(2026, 1, 25), 900)]).final
    later = stage(spec, units=1200, as_of=date(2026, 2, 8), earlier=[(date(2026, 2, 1), 1000)])
    assert not later.final and "2026-02-01" in later.why
    ends = spec_from_dict({**_spec().model_dump(mode="json"), "end": "2026-03-02T00:00:00Z"})
    assert not stage(ends, units=5, as_of=date(2026, 2, 28)).final
    assert stage(ends, units=5, as_of=date(2026, 3, 1)).final  # end at midnight: its last day is the day before
    assert not stage(_spec(), units=10**9, as_of=date(2030, 1, 1)).final  # no plan: every look is interim


def _iv(v: float, lo: float, hi: float, alo: float, ahi: float, se: float = 1.0) -> Interval:
    return Interval(value=v, se=se, lo=lo, hi=hi, anytime_lo=alo, anytime_hi=ahi)


def test_rule_reads_the_interval_of_the_look() -> None:
    kw = dict(df=None, trustworthy=True, gate_problem="")
    interim = _spec(planned_units=1000)
    # fixed interval above break-even but the anytime one is not: not yet known before the plan
    iv = _iv(5.0, 3.5, 6.5, 2.0, 8.0)
    d = decide(interim, iroas=iv, units=500, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert (d.answer, d.basis, d.lo, d.hi) == ("not_yet_known", "anytime", 2.0, 8.0)
    d = decide(interim, iroas=iv, units=1000, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert (d.answer, d.basis, d.lo, d.hi) == ("pays", "fixed", 3.5, 6.5)
    d = decide(interim, iroas=_iv(1.0, 0.5, 1.5, 0.1, 3.0), units=500, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert d.answer == "does_not_pay" and "Cut" in d.action
    d = decide(interim, iroas=None, units=1000, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert d.answer == "not_yet_known" and "No spend" in d.reason
    d = decide(interim, iroas=iv, units=1000, as_of="2026-02-01", df=None, trustworthy=False,
               gate_problem="the split audit fails (SRM)")
    assert d.answer == "not_yet_known" and d.withheld and "SRM" in d.reason


def test_p_against_breakeven_equals_welch_on_shifted_data() -> None:
    # Reference: scipy.stats.ttest_ind(equal_var=False) (Welch 1947) of the exposed arm's values
    # shifted by the break-even difference against the holdout's: the same null, tested by scipy.
    from armlock.readout.stats import welch
    from armlock.shared.readout_tables import Moments

    rng = np.random.default_rng(7)
    a, b = rng.gamma(2.0, 3.0, 400), rng.gamma(2.0, 2.8, 300)
    spend_per_unit, target = 0.12, 3.0  # iROAS = difference / spend per exposed unit
    est = welch(Moments.of(("y",), a), Moments.of(("y",), b), "y")
    k = 1 / spend_per_unit
    iv = Interval(value=est.value * k, se=est.se * k, lo=est.lo * k, hi=est.hi * k)
    ref = sps.ttest_ind(a - target * spend_per_unit, b, equal_var=False)
    assert p_against(iv, target, est.df) == pytest.approx(ref.pvalue, rel=1e-9)


def test_read_weekly_the_rule_says_pays_at_break_even_about_as_often_as_alpha_allows() -> None:
    # 1,000 simulated tests exactly at break-even, 10% holdout, 8 weekly looks, 160,000 units at the
    # planned end; the large run (scripts/readout_decision.py, docs/readout-decision.md) has more.
    r = false_pays(tests=1000, weeks=8, per_week=20_000, holdout_share=0.1, seed=21, min_buyers=MIN_BUYERS)
    assert r.rule <= 0.05  # the union bound: alpha / 2 over the anytime looks + alpha / 2 at the end
    assert r.rule <= r.fixed_once + 0.015  # the anytime looks add little to the one final look
    assert r.fixed_weekly >= 2 * r.rule  # what the rule prevents: the fixed interval read every week


def test_the_floor_of_buyers_keeps_small_tests_near_alpha() -> None:
    # 16,000 units, 10% holdout, about 64 holdout buyers at the end: without the floor the
    # normal approximation says "pays" at break-even about 9-10% of the time (docs/readout-decision.md)
    r = false_pays(tests=1000, weeks=8, per_week=2_000, holdout_share=0.1, seed=22, min_buyers=MIN_BUYERS)
    assert r.rule <= 0.06 and r.rule_no_floor >= r.rule + 0.02
    d = decide(_spec(planned_units=10), iroas=_iv(9.0, 5.0, 13.0, 4.0, 14.0), units=10, as_of="2026-02-01",
               df=None, trustworthy=True, gate_problem="", buyers=MIN_BUYERS - 1)
    assert d.answer == "not_yet_known" and "Too few buyers" in d.reason


def test_no_interval_and_no_plan_are_said() -> None:
    kw = dict(df=None, trustworthy=True, gate_problem="")
    d = decide(_spec(planned_units=10), iroas=Interval(value=2.0), units=5, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert d.answer == "not_yet_known" and d.reason.startswith("Cannot judge:")
    d = decide(_spec(), iroas=_iv(3.0, 2.0, 4.0, 1.0, 5.0), units=5, as_of="2026-02-01", **kw)  # type: ignore[arg-type]
    assert d.answer == "not_yet_known" and "set planned_units" in d.action and d.basis == "anytime"
