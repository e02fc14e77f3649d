"""Planning from pre-period files: what is estimated (checked against numpy on the same data) and clear errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from armlock.assign import InputError
from armlock.plan.estimate import PrePeriodColumns, estimate_pre_period


def _files(tmp_path: Path, n: int = 3000, days: int = 28, seed: int = 3, fmt: str = "csv") -> tuple[Path, Path, dict]:
    rng = np.random.default_rng(seed)
    ids = [f"u{i}" for i in range(n)]
    first = pd.Timestamp("2026-10-01", tz="UTC") + pd.to_timedelta(rng.integers(0, days * 86400, n), unit="s")
    first = first.where(np.arange(n) != 0, pd.Timestamp("2026-10-01 00:00", tz="UTC"))
    first = first.where(np.arange(n) != 1, pd.Timestamp("2026-10-01 00:00", tz="UTC") + pd.Timedelta(days=days - 1))
    pre_rev = rng.gamma(0.2, 40.0, n)
    buys = rng.random(n) < 0.04 + 0.2 * (pre_rev > 20)
    orders = []
    for i in np.flatnonzero(buys):
        for _ in range(rng.integers(1, 3)):
            orders.append((ids[i], float(np.round(rng.lognormal(3.5, 0.8), 2))))
    visits = pd.DataFrame({"unit_id": ids, "first_seen": first.strftime("%Y-%m-%dT%H:%M:%SZ"),
                           "pre_revenue": np.round(pre_rev, 2), "pre_orders": rng.poisson(0.2, n)})
    od = pd.DataFrame(orders, columns=["unit_id", "revenue"])
    vp, op = tmp_path / f"visits.{fmt}", tmp_path / f"orders.{fmt}"
    if fmt == "csv":
        visits.to_csv(vp, index=False)
        od.to_csv(op, index=False)
    else:
        visits.to_parquet(vp)
        od.to_parquet(op)
    per_unit = od.groupby("unit_id")["revenue"].sum().reindex(ids, fill_value=0.0).to_numpy()
    truth = {"n": n, "days": days, "y": per_unit, "orders": len(od), "x": visits["pre_revenue"].to_numpy(),
             "buyers": int((od.groupby("unit_id").size() > 0).sum())}
    return vp, op, truth


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_estimates_match_numpy_on_the_same_data(tmp_path: Path, fmt: str) -> None:
    vp, op, t = _files(tmp_path, fmt=fmt)
    pre = estimate_pre_period(vp, op)
    v = pre.values
    assert v["weekly_units"] == pytest.approx(t["n"] / (t["days"] / 7))
    assert v["revenue_mean"] == pytest.approx(t["y"].mean())
    assert v["revenue_sd"] == pytest.approx(t["y"].std(ddof=1))
    assert v["conversion"] == pytest.approx(t["buyers"] / t["n"])
    assert v["order_value"] == pytest.approx(t["y"].sum() / t["orders"])
    assert v["rho"] == pytest.approx(np.corrcoef(t["x"], t["y"])[0, 1])  # the readout's default covariate
    names = {e.name: e for e in pre.estimates}
    assert names["weekly new units"].units == t["n"] and f"{t['days']} days" in names["weekly new units"].how
    assert "pre_revenue" in names["pre-period correlation (rho)"].how


def test_rows_set_aside_are_counted(tmp_path: Path) -> None:
    vp, op, t = _files(tmp_path)
    with open(vp, "a") as fh:
        fh.write(",2026-10-03T00:00:00Z,1,0\nu5,2026-10-02T00:00:00Z,1,0\n")
    with open(op, "a") as fh:
        fh.write("stranger,10\n,5\nu7,-12.5\n")
    pre = estimate_pre_period(vp, op)
    text = " ".join(pre.notes)
    assert "1 row(s) with an empty 'unit_id'" in text
    assert "1 repeated row(s)" in text
    assert "1 order(s) of" in text and "not in the visits file" in text
    assert "negative revenue (refunds) were kept" in text


def test_spec_column_map_and_explicit_orders_columns(tmp_path: Path) -> None:
    vp, op, t = _files(tmp_path)
    v = pd.read_csv(vp).rename(columns={"unit_id": "vid", "first_seen": "ts"})
    v["pre_orders"] = (t["y"] > 0).astype(int) + np.random.default_rng(4).poisson(0.2, len(v))  # correlated
    v.to_csv(vp, index=False)
    pd.read_csv(op).rename(columns={"unit_id": "visitor", "revenue": "amount"}).to_csv(op, index=False)
    cols = PrePeriodColumns(unit_id="vid", first_seen="ts", orders_unit_id="visitor", orders_revenue="amount",
                            covariates=("pre_orders",), named_by={"covariates": "--covariate"})
    pre = estimate_pre_period(vp, op, cols)
    assert pre.values["revenue_mean"] == pytest.approx(t["y"].mean())
    assert "pre_orders" in pre.estimates[-1].how
    assert pre.values["rho"] == pytest.approx(np.corrcoef(v["pre_orders"], t["y"])[0, 1])


def test_orders_file_without_orders(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path)
    op.write_text("unit_id,revenue\n")
    with pytest.raises(InputError, match="orders file has no orders"):
        estimate_pre_period(vp, op)


def test_orders_of_other_units_only(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path)
    op.write_text("unit_id,revenue\nx1,10\nx2,20\n")
    with pytest.raises(InputError, match="none of its 2 order"):
        estimate_pre_period(vp, op)


def test_missing_column_names_file_and_spec_key(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path)
    # an error quotes who named the column: the option, the spec's setting, or the default name (never a spec
    # that was not given)
    with pytest.raises(InputError, match=r"column 'amount' \(--orders-revenue-column\) not found in the orders file"):
        estimate_pre_period(vp, op, PrePeriodColumns(orders_revenue="amount",
                                                     named_by={"orders_revenue": "--orders-revenue-column"}))
    with pytest.raises(InputError, match=r"column 'revenue' \(the default name; --orders-revenue-column names "
                                         r"another\) not found in the orders file") as e:
        op.write_text("unit_id,amount\nu1,5\n")
        estimate_pre_period(vp, op)
    assert "spec" not in str(e.value) and "[readout" not in str(e.value)
    with pytest.raises(InputError, match=r"column 'nope' \(--covariate\) not found in the visits file"):
        estimate_pre_period(vp, op, PrePeriodColumns(covariates=("nope",), named_by={"covariates": "--covariate"}))


def test_rho_is_for_the_covariates_the_readout_uses_not_the_best_column(tmp_path: Path) -> None:
    vp, op, t = _files(tmp_path)
    v = pd.read_csv(vp)
    v["pre_orders"] = t["y"] + np.random.default_rng(5).normal(0, t["y"].std(), len(v))  # better correlated
    v.to_csv(vp, index=False)
    both = estimate_pre_period(vp, op, PrePeriodColumns(covariates=("pre_revenue",), named_by={"covariates": "x"}))
    assert both.values["rho"] == pytest.approx(np.corrcoef(t["x"], t["y"])[0, 1])  # not pre_orders' higher one
    # two covariates: the multiple correlation, R^2 of the least-squares fit (numpy lstsq as the reference)
    two = estimate_pre_period(vp, op, PrePeriodColumns(covariates=("pre_revenue", "pre_orders")))
    X = np.column_stack([np.ones(len(v)), v["pre_revenue"], v["pre_orders"]])
    beta, *_ = np.linalg.lstsq(X, t["y"], rcond=None)
    r2 = 1 - np.sum((t["y"] - X @ beta) ** 2) / np.sum((t["y"] - t["y"].mean()) ** 2)
    assert two.values["rho"] == pytest.approx(np.sqrt(r2))
    none = estimate_pre_period(vp, op, PrePeriodColumns(covariates=(), named_by={"covariates": "s.toml: [readout] covariates"}))
    assert "rho" not in none.values and any("will use no covariate" in n for n in none.notes)


def test_sampling_range_of_the_variance_matches_a_bootstrap(tmp_path: Path) -> None:
    # the delta-method ranges (Casella & Berger 2002, §5.5.4) against a plain bootstrap of the same units
    # (Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13, percentile interval)
    from armlock.plan.estimate import sampling_ranges

    rng = np.random.default_rng(8)
    n = 12_600
    y = np.where(rng.random(n) < 0.05, rng.lognormal(3.5, 0.9, n), 0.0)
    cv2, var = sampling_ranges(y)
    idx = rng.integers(0, n, (400, n))
    boot = y[idx]
    b_var = boot.var(axis=1, ddof=1) / y.var(ddof=1)
    b_cv2 = (boot.std(axis=1, ddof=1) / boot.mean(axis=1)) ** 2 / (y.std(ddof=1) / y.mean()) ** 2
    for (lo, hi), b in ((var, b_var), (cv2, b_cv2)):
        q_lo, q_hi = np.quantile(b, [0.025, 0.975])
        assert lo < 1 < hi
        assert abs(lo - q_lo) < 0.03 and abs(hi - q_hi) < 0.03, (lo, hi, q_lo, q_hi)


def test_revenue_that_never_varies(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path, n=100)
    op.write_text("unit_id,revenue\n" + "".join(f"u{i},5\n" for i in range(100)))
    with pytest.raises(InputError, match="same revenue"):
        estimate_pre_period(vp, op)


def test_not_a_number_revenue_names_the_line(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path)
    op.write_text("unit_id,revenue\nu1,10\nu2,ten\n")
    with pytest.raises(InputError, match="line 3"):
        estimate_pre_period(vp, op)


def test_too_few_units_and_short_history(tmp_path: Path) -> None:
    vp, op, _ = _files(tmp_path, n=10)
    with pytest.raises(InputError, match="at least 30"):
        estimate_pre_period(vp, op)
    vp, op, _ = _files(tmp_path, n=500, days=3)
    assert any("only 3 day(s)" in n for n in estimate_pre_period(vp, op).notes)


def test_a_weak_correlation_is_not_planned_on(tmp_path: Path) -> None:
    vp, op, t = _files(tmp_path)
    v = pd.read_csv(vp)
    v["pre_revenue"] = np.random.default_rng(9).normal(size=len(v))  # unrelated to revenue
    v["pre_orders"] = np.random.default_rng(10).normal(size=len(v))
    v.to_csv(vp, index=False)
    pre = estimate_pre_period(vp, op)
    r = abs(np.corrcoef(v["pre_revenue"], t["y"])[0, 1])
    assert r < 0.05 and "rho" not in pre.values
    assert any("too weak to plan on" in n for n in pre.notes)


def test_repeated_order_ids_count_once(tmp_path: Path) -> None:
    vp, op, t = _files(tmp_path)
    o = pd.read_csv(op)
    o["order_id"] = [f"o{i}" for i in range(len(o))]
    o = pd.concat([o, o.iloc[:3]])  # three orders exported twice
    o.to_csv(op, index=False)
    pre = estimate_pre_period(vp, op, PrePeriodColumns(orders_order_id="order_id"))
    assert pre.values["revenue_mean"] == pytest.approx(t["y"].mean())
    assert any("3 repeated order id(s) in 'order_id' were counted once" in n for n in pre.notes)
