"""Monotone checks (issue #20): a check's status never improves as its seeded fault grows.

Hypothesis sweeps each fault's size to extreme values (p-values that underflow to exactly 0, a
covariate of 1e308, an arm that all but vanishes) on the engine-neutral tables the checks read, so
each example costs milliseconds. Severity: pass < warn < fail (skipped never occurs here).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from armlock.assign import spec_from_dict
from armlock.audit.balance import check_balance
from armlock.audit.churn import check_churn
from armlock.shared.engine_pandas import numeric_moments
from armlock.audit.leakage import check_leakage
from armlock.audit.model import SEVERITY
from armlock.audit.srm import check_srm
from armlock.shared.tables import NUMERIC_COLUMNS, BalanceTables, ChurnTables, LeakageTables, SplitTables

SPEC = spec_from_dict({"name": "mono", "salt": "invented-mono-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed", "weight": 8000}],
                       "audit": {"covariates": ["pre_orders"], "categorical_covariates": [], "segments": []}})
ARMS = ["holdout", "exposed"]
FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
# fault sizes spread over many orders of magnitude: 0, tiny, moderate, up to near the float maximum
SIZES = st.one_of(st.just(0.0), st.floats(min_value=1e-6, max_value=1e300, allow_nan=False, allow_infinity=False),
                  st.sampled_from([1e-3, 0.05, 0.25, 1.0, 10.0, 1e6, 1e150, 1e200, 1e300]))


def _grows(f: st.SearchStrategy[float]) -> st.SearchStrategy[tuple[float, float]]:
    return st.tuples(f, f).map(lambda t: (min(t), max(t)))


# -- covariate balance: the exposed arm's pre-period bumped by a factor, or one huge value ---------
_RNG = np.random.default_rng(20)
_N = 2_000
_ARM = (_RNG.uniform(size=_N) < 0.8).astype(np.int64)  # 0 holdout, 1 exposed
_BASE = _RNG.gamma(2.0, 3.0, size=_N)


def _balance_status(x: np.ndarray) -> str:
    rows = [{"covariate": "pre_orders", "arm": ARMS[int(r.pop("arm_index"))], **r}
            for r in numeric_moments(x, _ARM, 2)]
    return check_balance(SPEC, BalanceTables(numeric=pd.DataFrame(rows, columns=NUMERIC_COLUMNS),
                                             categorical={})).status


def _bumped(f: float) -> np.ndarray:
    with np.errstate(over="ignore"):
        return np.where(_ARM == 1, _BASE * (1.0 + f), _BASE)


@FAST
@given(_grows(SIZES))
def test_balance_never_improves_as_the_imbalance_grows(sizes: tuple[float, float]) -> None:
    small, large = sizes
    assert SEVERITY[_balance_status(_bumped(small))] <= SEVERITY[_balance_status(_bumped(large))], sizes


def test_balance_fails_an_extreme_imbalance_whose_p_underflows() -> None:
    # a 25% bump: SMD about 0.4, Holm p exactly 0.0 in double precision; it once read as p = 1 (PASS)
    for f in (0.25, 1.0, 1e6, 1e300):
        assert _balance_status(_bumped(f)) == "fail", f


@FAST
@given(_grows(st.floats(min_value=0.0, max_value=1e308, allow_nan=False)))
def test_balance_never_improves_as_one_value_grows_to_1e308(sizes: tuple[float, float]) -> None:
    def one(v: float) -> str:
        x = _BASE.copy()
        x[np.argmax(_ARM == 1)] = v
        return _balance_status(x)

    assert SEVERITY[one(sizes[0])] <= SEVERITY[one(sizes[1])], sizes


def test_a_covariate_of_1e308_is_never_a_pass() -> None:
    x = _BASE.copy()
    x[np.argmax(_ARM == 1)] = 1e308
    assert _balance_status(x) != "pass"


# -- SRM: the holdout loses a share of its units, at sizes up to a billion --------------------------
def _srm_status(n: int, loss: float) -> str:
    hold = int(round(n * 0.2 * (1.0 - loss)))
    exp = int(round(n * 0.8))
    daily = pd.DataFrame({"holdout": [hold], "exposed": [exp]}, index=["2026-01-05"])
    return check_srm(SPEC, SplitTables(arms=ARMS, units={"holdout": hold, "exposed": exp}, daily=daily,
                                       segments={})).status


@FAST
@given(st.integers(min_value=50, max_value=10**9), _grows(st.floats(min_value=0.0, max_value=1.0)))
def test_srm_never_improves_as_the_holdout_shrinks(n: int, losses: tuple[float, float]) -> None:
    assert SEVERITY[_srm_status(n, losses[0])] <= SEVERITY[_srm_status(n, losses[1])], (n, losses)


def test_srm_fails_when_the_holdout_vanishes_at_scale() -> None:
    assert _srm_status(10**9, 1.0) == "fail" and _srm_status(10**6, 0.5) == "fail"


# -- leakage: the vendor reaches a growing share of the holdout -------------------------------------
def _leak_status(h_units: int, leaked: int) -> str:
    by_arm = pd.DataFrame({"units": [h_units, 4 * h_units], "exposed_units": [leaked, 2 * h_units],
                           "pre_exposed_units": [0, 0], "impressions": [leaked, 8 * h_units], "clicks": [0, 0]},
                          index=ARMS)
    empty = pd.DataFrame(columns=["units", "impressions", "clicks"])
    lt = LeakageTables(rows=10 * h_units, by_arm=by_arm, holdout_by_campaign=empty, holdout_by_week=empty,
                       holdout_first=None, pre_before_start=0, pre_before_assignment=0, pre_rows=0, unseen_ids=0,
                       unseen_rows=0, unseen_by_arm={}, exposed_ids=2 * h_units + leaked, rows_read=10 * h_units)
    return check_leakage(SPEC, lt).status


@FAST
@given(st.integers(min_value=1, max_value=10**9), _grows(st.floats(min_value=0.0, max_value=1.0)))
def test_leakage_never_improves_as_it_grows(h_units: int, shares: tuple[float, float]) -> None:
    a, b = (_leak_status(h_units, int(s * h_units)) for s in shares)
    assert SEVERITY[a] <= SEVERITY[b], (h_units, shares)


# -- identity churn: a growing share of customers in several arms -----------------------------------
def _churn_status(customers: int, share: float) -> str:
    multi = int(share * customers)
    by_browser = pd.DataFrame({"customers": [customers], "multi_arm": [multi]}, index=["browser-a"])
    hist = pd.DataFrame({"browser": ["browser-a"], "ids": [2], "customers": [customers]})
    ct = ChurnTables(links=2 * customers, customers=customers, multi_arm=multi, ids_hist={2: customers},
                     by_browser=by_browser, browser_hist=hist, ids_not_in_visits=0, link_ids=2 * customers)
    return check_churn(SPEC, ct).status


@FAST
@given(st.integers(min_value=1, max_value=10**8), _grows(st.floats(min_value=0.0, max_value=1.0)))
def test_churn_never_improves_as_it_grows(customers: int, shares: tuple[float, float]) -> None:
    a, b = (_churn_status(customers, s) for s in shares)
    assert SEVERITY[a] <= SEVERITY[b], (customers, shares)
