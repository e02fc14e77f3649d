"""The readout's reader and engine on hand-made files: joins, windows, refunds, duplicates, cap, notes.

Each figure is checked against a plain pandas computation over the same rows (the test's own
arithmetic), so the engine's bookkeeping cannot drift unnoticed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import InputError
from armlock.readout.run import run_readout

from .helpers import small_spec, visits_frame, write


def _orders(v: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for i, u in enumerate(v["unit_id"]):
        if i % 3 == 0:
            t = pd.Timestamp(v["first_seen"][i]) + pd.Timedelta(hours=5 + i)
            rows.append({"unit_id": u, "order_time": t, "revenue": 20.0 + i, "order_id": f"o{i}"})
        if i % 5 == 0:
            t = pd.Timestamp(v["first_seen"][i]) + pd.Timedelta(days=2)
            rows.append({"unit_id": u, "order_time": t, "revenue": 15.0, "order_id": f"p{i}"})
    o = pd.DataFrame(rows)
    o["order_time"] = pd.to_datetime(o["order_time"], utc=True).dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    return o


def _by_hand(v: pd.DataFrame, o: pd.DataFrame, as_of_end: pd.Timestamp) -> pd.DataFrame:
    o = o.assign(t=pd.to_datetime(o["order_time"], utc=True))
    o = o[o["t"] < as_of_end]
    per = o.groupby("unit_id").agg(revenue=("revenue", "sum"), orders=("revenue", lambda r: int((r >= 0).sum())))
    out = v.set_index("unit_id").join(per).fillna({"revenue": 0.0, "orders": 0})
    return out


def test_figures_match_a_hand_computation(tmp_path: Path) -> None:
    spec = small_spec()
    v = visits_frame(spec)
    o = _orders(v)
    o.loc[len(o)] = {"unit_id": "u003", "order_time": "2026-01-09T00:00:00Z", "revenue": -10.0, "order_id": "r1"}
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o),
                      as_of=pd.Timestamp("2026-01-24").date())
    hand = _by_hand(v, o, pd.Timestamp("2026-01-25", tz="UTC"))
    hand = hand[pd.to_datetime(hand["first_seen"], utc=True) < pd.Timestamp("2026-01-25", tz="UTC")]
    for row in rep.arms:
        h = hand[hand["arm"] == row.name]
        assert row.units == len(h)
        assert row.revenue == pytest.approx(h["revenue"].sum())
        assert row.orders == int(h["orders"].sum())
        assert row.buyers == int((h["orders"] > 0).sum())
        assert row.revenue_per_unit.value == pytest.approx(h["revenue"].mean())
        assert row.revenue_per_unit.se == pytest.approx(h["revenue"].std(ddof=1) / np.sqrt(len(h)))
    raw = next(e for e in rep.effects if e.metric == "revenue_per_unit" and e.method == "Welch")
    diff = hand[hand["arm"] == "exposed"]["revenue"].mean() - hand[hand["arm"] == "holdout"]["revenue"].mean()
    assert raw.absolute.value == pytest.approx(diff)
    assert any("1 refund row(s)" in n for n in rep.input_notes)
    assert rep.money.incremental_revenue.value == pytest.approx(
        next(e for e in rep.effects if e.primary).absolute.value * sum(a.units for a in rep.arms if a.role == "exposed"))


def test_duplicate_order_ids_are_counted_once_and_noted(tmp_path: Path) -> None:
    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    o = _orders(v)
    dup = pd.concat([o, o.iloc[:3]], ignore_index=True)
    a = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o))
    b = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "d.csv", dup))
    assert [x.revenue for x in a.arms] == [x.revenue for x in b.arms]
    assert any("3 row(s) repeat an order id" in n and "lines" in n for n in b.input_notes)


def test_orders_keyed_by_customer_use_the_first_unit(tmp_path: Path) -> None:
    # One customer with units in both arms: every order counts in the arm of the earliest unit.
    spec = small_spec(covariates=[], orders={"unit_id": "", "customer": "cust"})
    v = visits_frame(spec)
    hold = v[v["arm"] == "holdout"]["unit_id"].tolist()
    expo = v[v["arm"] == "exposed"]["unit_id"].tolist()
    first, later = (hold[0], expo[-1])  # visits are one per 12 h in id order: hold[0] vs expo[-1]
    assert v.index[v["unit_id"] == first][0] < v.index[v["unit_id"] == later][0]
    links = pd.DataFrame({"unit_id": [first, later, expo[0]], "customer_key": ["c1", "c1", "c2"]})
    o = pd.DataFrame({"cust": ["c1", "c1", "c2", "c9"], "order_time": ["2026-01-20T00:00:00Z"] * 4,
                      "revenue": [100.0, 50.0, 30.0, 999.0], "order_id": ["a", "b", "c", "d"]})
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o),
                      identities=write(tmp_path / "i.csv", links))
    by = {a.name: a for a in rep.arms}
    assert by["holdout"].revenue == pytest.approx(150.0)
    assert by["exposed"].revenue == pytest.approx(30.0)
    assert any("1 customer(s) have visitor ids in more than one arm" in n for n in rep.input_notes)
    assert any("1 order row(s) (999.00 revenue)" in n for n in rep.input_notes)


def test_customer_orders_without_identities_is_a_clear_error(tmp_path: Path) -> None:
    spec = small_spec(covariates=[], orders={"unit_id": "", "customer": "cust"})
    v = visits_frame(spec)
    o = pd.DataFrame({"cust": ["c1"], "order_time": ["2026-01-28T00:00:00Z"], "revenue": [1.0], "order_id": ["a"]})
    with pytest.raises(InputError, match="--identities"):
        run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o))


def test_day_window_leaves_out_and_counts_incomplete_units(tmp_path: Path) -> None:
    spec = small_spec(covariates=[], window=7)
    v = visits_frame(spec)  # first seen 2026-01-05 .. 2026-01-24 12:00
    o = _orders(v)
    o.loc[len(o)] = {"unit_id": "u000", "order_time": "2026-01-20T00:00:00Z", "revenue": 500.0, "order_id": "late"}
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o),
                      as_of=pd.Timestamp("2026-01-24").date())
    fs = pd.to_datetime(v["first_seen"], utc=True)
    complete = fs + pd.Timedelta(days=7) <= pd.Timestamp("2026-01-25", tz="UTC")
    assert sum(a.units for a in rep.arms) == int(complete.sum())
    assert any(f"{int((~complete).sum())} unit(s) first seen less than 7 days" in n for n in rep.input_notes)
    u0 = next(a for a in rep.arms if a.name == v.loc[0, "arm"])
    assert 500.0 > 0 and u0.revenue < 500.0  # the order 15 days after first-seen is outside u000's window


def test_revenue_cap_is_a_pooled_quantile(tmp_path: Path) -> None:
    spec = small_spec(covariates=[], revenue_cap=0.9)
    v = visits_frame(spec)
    o = _orders(v)
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o))
    hand = _by_hand(v, o, pd.Timestamp("2026-01-25", tz="UTC"))  # default as-of: the last first-seen day
    cap = float(np.quantile(hand["revenue"], 0.9))
    capped = hand["revenue"].clip(upper=cap)
    assert sum(a.revenue for a in rep.arms) == pytest.approx(capped.sum())
    assert any(f"{cap:,.2f}" in n and "all arms together" in n for n in rep.input_notes)


def test_orders_before_first_seen_and_unknown_units_are_noted(tmp_path: Path) -> None:
    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    o = pd.DataFrame({"unit_id": ["u010", "zzz"], "order_time": ["2026-01-05T01:00:00Z", "2026-01-10T00:00:00Z"],
                      "revenue": [10.0, 20.0], "order_id": ["a", "b"]})
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", o))
    assert sum(a.revenue for a in rep.arms) == 0
    assert any("placed before their unit was first seen" in n for n in rep.input_notes)
    assert any("unit id is not in the visits" in n for n in rep.input_notes)


@pytest.mark.parametrize("frame,message", [
    (pd.DataFrame({"unit_id": ["u001"], "when": ["2026-01-10T00:00:00Z"], "revenue": [1.0]}),
     "column 'order_time' not found in the orders file"),
    (pd.DataFrame({"unit_id": ["u001", "u002"], "order_time": ["2026-01-10T00:00:00Z"] * 2, "revenue": ["1.0", "ten"]}),
     "column 'revenue' has 1 value(s) that are not numbers (first: line 3"),
    (pd.DataFrame({"unit_id": ["u001"], "order_time": ["yesterday"], "revenue": [1.0]}),
     "column 'order_time' has 1 time(s) that are not ISO 8601"),
])
def test_bad_orders_name_file_column_and_row(tmp_path: Path, frame: pd.DataFrame, message: str) -> None:
    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    with pytest.raises(InputError) as exc:
        run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "orders.csv", frame))
    assert "orders.csv" in str(exc.value) and message in str(exc.value)


def test_spend_file_sums_the_test_days_and_notes_the_rest(tmp_path: Path) -> None:
    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    spend = pd.DataFrame({"day": ["2026-01-04", "2026-01-05", "2026-01-20", "2026-03-01"],
                          "amount": [5.0, 100.0, 50.0, 7.0], "campaign": ["a", "a", "b", "b"]})
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", _orders(v)),
                      spend_file=write(tmp_path / "s.csv", spend), as_of=pd.Timestamp("2026-01-24").date())
    assert rep.money.spend == pytest.approx(150.0)
    assert any("2 spend row(s) outside the test's days" in n for n in rep.input_notes)


def test_negative_spend_row_is_refused(tmp_path: Path) -> None:
    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    spend = pd.DataFrame({"day": ["2026-01-05"], "amount": [-1.0]})
    with pytest.raises(InputError, match="negative amount"):
        run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", _orders(v)),
                    spend_file=write(tmp_path / "s.csv", spend))


def test_covariate_missing_from_the_audit_is_read_and_blanks_get_the_pooled_mean(tmp_path: Path) -> None:
    spec = small_spec(covariates=["prior_orders"])
    v = visits_frame(spec)
    v["prior_orders"] = [float(i % 4) if i % 9 else None for i in range(len(v))]
    rep = run_readout(spec, visits=write(tmp_path / "v.csv", v), orders=write(tmp_path / "o.csv", _orders(v)))
    assert rep.adjustment is not None and rep.adjustment.covariates == ["prior_orders"]
    assert any("covariate 'prior_orders'" in n and "pooled mean" in n for n in rep.input_notes)


def test_exposure_flag_without_the_audit_engine_row_flag_matches(tmp_path: Path) -> None:
    # An engine that keeps no per-row exposure flag (Spark) leaves it None: the readout joins the
    # exposure log itself and must find the same exposed units.
    from armlock.shared import engine_pandas as audit_engine
    from armlock.shared.load import load_exposures, load_visits
    from armlock.shared.read import Frames
    from armlock.readout import engine_pandas

    spec = small_spec(covariates=[])
    v = visits_frame(spec)
    expo = v[v["arm"] == "exposed"].iloc[::2]
    e = pd.DataFrame({"unit_id": expo["unit_id"], "event_time": "2026-01-24T12:00:00Z", "campaign": "c",
                      "event_kind": "impression"})
    e.loc[len(e)] = {"unit_id": v["unit_id"][5], "event_time": "2026-01-01T00:00:00Z", "campaign": "c",
                     "event_kind": "impression"}  # before the start: not an exposure of the test
    fr = Frames(visits=None)  # type: ignore[arg-type]
    used = load_visits(spec, write(tmp_path / "v.csv", v), None, fr)
    load_exposures(spec, write(tmp_path / "e.csv", e), used, fr)
    tables = audit_engine.compute(spec, fr)
    fs = fr.visits["_time"].to_numpy(dtype="datetime64[ns]").view(np.int64)
    joined = engine_pandas._exposed_during_test(spec, fr, fs)
    assert joined.sum() > 0
    assert np.array_equal(joined, np.asarray(tables.leakage.exposed_rows, dtype=float))
