"""The readout never answers "trustworthy" from a broken orders export (issue #20): orders that match
no visit, a header-only file, every row set aside, one arm's orders only, 90% unmatched, infinite or
true/false revenue, --spend inf, `window = true`."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import InputError, SpecError, assign_many, spec_from_dict
from armlock.audit.synth import generate, generate_orders, write_logs
from armlock.readout.run import run_readout

SPEC = spec_from_dict({"name": "orders-gate", "salt": "invented-orders-2026", "start": "2026-01-05T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 3000}, {"name": "exposed", "weight": 7000}]})


@pytest.fixture(scope="module")
def shop(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Path], pd.DataFrame]:
    logs = generate(SPEC, units=6_000, days=28, seed=21)
    folder = tmp_path_factory.mktemp("orders-gate")
    paths = write_logs(logs, folder, "parquet")
    orders = generate_orders(SPEC, logs, days=28, seed=22, base_rate=0.3).orders
    return folder, paths, orders


def _readout(shop: tuple[Path, dict[str, Path], pd.DataFrame], orders: pd.DataFrame, name: str, **kw: object):  # type: ignore[no-untyped-def]
    folder, paths, _ = shop
    path = folder / f"{name}.parquet"
    orders.to_parquet(path, index=False)
    return run_readout(SPEC, visits=paths["visits"], exposures=paths["exposures"], orders=path, **kw)  # type: ignore[arg-type]


def _orders_check(rep):  # type: ignore[no-untyped-def]
    return next(g for g in rep.gate if g.id == "orders")


def test_healthy_orders_are_trustworthy(shop) -> None:  # type: ignore[no-untyped-def]
    rep = _readout(shop, shop[2], "healthy")
    assert rep.trustworthy and _orders_check(rep).status == "pass"


@pytest.mark.parametrize("case", ["no_match", "header_only", "all_after_as_of", "holdout_only", "unmatched_90"])
def test_broken_orders_are_never_trustworthy(shop, case: str) -> None:  # type: ignore[no-untyped-def]
    o = shop[2].copy()
    if case == "no_match":  # keyed by another id space
        o["unit_id"] = "cust-" + o["unit_id"].str[1:]
    elif case == "header_only":
        o = o.iloc[:0]
    elif case == "all_after_as_of":
        o["order_time"] = o["order_time"] + pd.Timedelta(days=400)
    elif case == "holdout_only":
        o = o[np.asarray(assign_many(SPEC, o["unit_id"].tolist())) == "holdout"]
    else:
        rng = np.random.default_rng(3)
        swap = rng.random(len(o)) < 0.9
        o.loc[swap, "unit_id"] = "x" + o.loc[swap, "unit_id"]
    if case == "all_after_as_of":
        rep = _readout(shop, o, case, as_of=pd.Timestamp("2026-02-01").date())
    else:
        rep = _readout(shop, o, case)
    check = _orders_check(rep)
    assert check.status == "fail" and rep.status == "fail" and not rep.trustworthy, check.summary
    assert rep.headline.startswith("NOT TRUSTWORTHY")


def test_infinite_revenue_is_set_aside_and_said(shop) -> None:  # type: ignore[no-untyped-def]
    o = shop[2].copy()
    o.loc[o.index[:3], "revenue"] = math.inf
    rep = _readout(shop, o, "inf")
    assert any("3 row(s) with an infinite 'revenue'" in n for n in rep.input_notes)
    assert "3 with infinite revenue" in _orders_check(rep).summary


def test_revenue_of_1e308_is_a_clear_error_naming_column_and_rows(shop) -> None:  # type: ignore[no-untyped-def]
    o = shop[2].copy()
    o.loc[o.index[:2], "revenue"] = 1e308
    with pytest.raises(InputError, match=r"huge.parquet: column 'revenue' .* has 2 value\(s\) of 1e\+15 or more \(rows? "):
        _readout(shop, o, "huge")


def test_true_false_revenue_is_refused(shop) -> None:  # type: ignore[no-untyped-def]
    o = shop[2].copy()
    o["revenue"] = o["revenue"] > 50
    with pytest.raises(InputError, match="holds true/false values, not amounts"):
        _readout(shop, o, "bool")


@pytest.mark.parametrize("spend", [math.inf, -math.inf, math.nan, -1.0])
def test_spend_must_be_a_finite_amount(shop, spend: float) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(InputError, match="--spend must be a finite amount"):
        _readout(shop, shop[2], "spend", spend=spend)


def test_window_true_is_refused() -> None:
    with pytest.raises(SpecError, match="not true or false"):
        spec_from_dict({"name": "w", "salt": "s", "start": "2026-01-05T00:00:00Z",
                        "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                        "readout": {"window": True}})


def test_customer_keyed_orders_with_an_empty_links_file_fail_the_gate(shop, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # once an internal error (an index into no links at all); now the orders match nothing: FAIL
    folder, paths, orders = shop
    links = tmp_path / "links.csv"
    links.write_text("unit_id,customer_key\n", encoding="utf-8")
    spec = spec_from_dict({"name": "orders-gate", "salt": "invented-orders-2026", "start": "2026-01-05T00:00:00Z",
                           "arms": [{"name": "holdout", "weight": 3000}, {"name": "exposed", "weight": 7000}],
                           "readout": {"orders": {"unit_id": "", "customer": "unit_id"}}})
    path = folder / "by-customer.parquet"
    orders.to_parquet(path, index=False)
    rep = run_readout(spec, visits=paths["visits"], exposures=paths["exposures"], identities=links, orders=path)
    assert not rep.trustworthy and _orders_check(rep).status == "fail"


@pytest.mark.parametrize("day", ["9999-12-31", "1500-01-01"])
def test_an_as_of_beyond_the_readable_years_is_a_clear_error(shop, day: str) -> None:  # type: ignore[no-untyped-def]
    from datetime import date

    from armlock.audit.run import run_audit

    with pytest.raises(InputError, match=f"--as-of {day} is outside the years 1678-2261"):
        _readout(shop, shop[2], "asof", as_of=date.fromisoformat(day))
    with pytest.raises(InputError, match=f"--as-of {day} is outside the years 1678-2261"):
        run_audit(SPEC, visits=shop[1]["visits"], as_of=date.fromisoformat(day))


def test_check_refuses_a_time_format_with_an_unknown_directive() -> None:
    with pytest.raises(SpecError, match="'Q' is a bad directive"):
        spec_from_dict({"name": "w", "salt": "s", "start": "2026-01-05T00:00:00Z",
                        "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
                        "audit": {"visits": {"first_seen_format": "%Q %Y"}}})


def _spend(path: Path, days: pd.DatetimeIndex, amount: float = 100.0) -> Path:
    pd.DataFrame({"day": days.strftime("%Y-%m-%d"), "amount": amount}).to_csv(path, index=False)
    return path


def test_a_spend_file_that_ends_early_fails_the_gate(shop, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    full = pd.date_range("2026-01-05", "2026-02-01", freq="D")
    ok = _readout(shop, shop[2], "spend-ok", spend_file=_spend(tmp_path / "ok.csv", full))
    assert next(g for g in ok.gate if g.id == "spend").status == "pass" and ok.trustworthy
    early = _readout(shop, shop[2], "spend-early", spend_file=_spend(tmp_path / "early.csv", full[:-10]))
    spend = next(g for g in early.gate if g.id == "spend")
    assert spend.status == "fail" and "10 days before the as-of date" in spend.summary and not early.trustworthy
    holes = _readout(shop, shop[2], "spend-holes", spend_file=_spend(tmp_path / "holes.csv", full.delete([5, 6])))
    assert next(g for g in holes.gate if g.id == "spend").status == "warn"


def test_an_infinite_spend_amount_is_refused(shop, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(InputError, match="amount\\(s\\) that are infinite"):
        _readout(shop, shop[2], "spend-inf", spend_file=_spend(tmp_path / "inf.csv",
                                                             pd.date_range("2026-01-05", periods=3), math.inf))
