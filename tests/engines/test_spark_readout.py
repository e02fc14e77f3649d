"""Readout parity: the Spark engine's readout tables and report equal the pandas engine's.

Each case runs both engines' `Engine.readout` on the same files (Parquet, CSV.gz, or catalog
tables) and compares the audit's tables, every readout moment (counts exactly, means and
cross-products bit for bit), the set-aside counts and notes, and the two JSON readout reports
(identical except their generation time). The reference outside the project is Apache Spark
itself (its readers, joins, sorted arrays and aggregates) against pandas and numpy. One small
local session for the whole run (tests/conftest.py); the cases are few and small, to stay fast.
"""

from __future__ import annotations

import json
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from armlock.assign import InputError, Spec, spec_from_dict
from armlock.audit import synth
from armlock.shared.engine import Inputs, PandasEngine, canonical
from armlock.readout.run import reports_from_result

from .test_spark_engine import LAYOUTS, assert_tables_equal

pytestmark = pytest.mark.spark

DAYS = 35


def _spec(layout: str, **readout: Any) -> Spec:
    return spec_from_dict({
        "name": f"readout-{layout}", "salt": f"readout-parity-{layout}", "start": "2026-01-05T00:00:00Z",
        "arms": LAYOUTS[layout],
        # pre_revenue is a readout covariate the audit does not read: the engines read it themselves
        "audit": {"covariates": ["pre_orders"]},
        "readout": {"covariates": ["pre_orders", "pre_revenue"],
                    "orders": {"attributed": "attributed_channel"}, **readout}})


def _files(spec: Spec, directory: Path, fmt: str, seed: int, by_customer: bool = False) -> dict[str, Path]:
    logs = synth.generate(spec, units=1000, days=DAYS, seed=seed, faults=("cookie_churn",), events_per_unit=2.0)
    orders = synth.generate_orders(spec, logs, days=DAYS, seed=seed + 1, base_rate=0.6, duplicates=0.02)
    o = orders.orders
    # invented troubles: a few orders of unknown units, before first-seen, and blank covariates
    extra = o.iloc[:3].copy()
    extra["unit_id"] = ["nobody-1", "nobody-2", "nobody-3"]
    early = o.iloc[3:5].copy()
    early["order_time"] = pd.Timestamp("2026-01-01T00:00:00Z")
    extra["order_id"], early["order_id"] = ["x-1", "x-2", "x-3"], ["x-4", "x-5"]
    # refunds that reuse their order's id (shared.load_readout._order_ids): partial, dated after the as-of,
    # and one exact repeat
    sales = o[o["revenue"] > 0].iloc[10:16]
    reused = sales.copy()
    reused["revenue"] = -5.0
    reused["order_time"] = [pd.Timestamp("2026-03-01T00:00:00Z")] * 3 + \
        list(pd.to_datetime(sales["order_time"].iloc[3:], utc=True) + pd.Timedelta(days=1))
    o = pd.concat([o, extra, early, reused, reused.iloc[-1:]], ignore_index=True)
    logs.visits.loc[logs.visits.index % 17 == 0, "pre_revenue"] = np.nan
    if by_customer:  # orders carry the customer key of their unit's link (units without one keep their id)
        links = logs.identities.drop_duplicates("unit_id").set_index("unit_id")["customer_key"]
        o["customer_key"] = o["unit_id"].map(links).fillna(o["unit_id"])
        o = o.drop(columns=["unit_id"])
    o["order_time"] = pd.to_datetime(o["order_time"], utc=True).astype("datetime64[us, UTC]")  # Spark tables hold us
    orders.orders = o
    paths = synth.write_logs(logs, directory, fmt)
    paths["orders"] = synth.write_orders(orders, directory, fmt)
    return paths


def _spark_engine(spark: Any) -> Any:
    from armlock.shared.engine_spark import SparkEngine

    return SparkEngine(session=spark)


def _inputs(paths: dict[str, Any]) -> Inputs:
    return Inputs(paths["visits"], paths["exposures"], paths["identities"], paths["orders"])


def assert_readout_parity(p: Any, s: Any) -> None:
    assert_tables_equal(canonical(p.audit.tables), canonical(s.audit.tables))
    assert p.audit.notes == s.audit.notes and p.audit.counts == s.audit.counts
    a, b = p.tables, s.tables
    assert (a.arms, a.covariates, a.counts, a.attributed) == (b.arms, b.covariates, b.counts, b.attributed)
    assert a.orders_daily == b.orders_daily and sum(a.orders_daily.values()) > 0  # the orders feed's days (issue #20)
    assert p.notes == s.notes
    assert [d for d, _ in a.looks] == [d for d, _ in b.looks]
    for (what, x), (_, y) in zip([("final", a.final), *a.looks], [("final", b.final), *b.looks]):
        for arm in a.arms:
            mx, my = x[arm], y[arm]
            assert mx.names == my.names and mx.n == my.n, (what, arm)
            assert np.array_equal(mx.means, my.means) and np.array_equal(mx.m2, my.m2), (what, arm)


def _json(spec: Spec, res: Any) -> dict:
    rep = reports_from_result(spec, res, spend=2_500.0)[0].to_json_dict()
    rep.pop("generated_at")
    return rep


def test_two_arms_by_unit_with_window_and_cap_parquet(spark: Any, tmp_path: Path) -> None:
    spec = _spec("two_arms", window=14, revenue_cap=0.99)
    inputs = _inputs(_files(spec, tmp_path, "parquet", seed=21))
    p = PandasEngine().readout(spec, inputs, date(2026, 2, 5), lambda n: None)
    s = _spark_engine(spark).readout(spec, inputs, date(2026, 2, 5), lambda n: None)
    c = p.tables.counts
    assert c["units_capped"] > 0 and c["orders_after_window"] > 0 and c["units_window_incomplete"] > 0
    assert c["orders_unmatched"] == 3 and c["orders_before_first_seen"] == 2 and c["duplicate_orders"] > 0
    assert c["refund_rows"] > 0 and any("pooled mean" in n for n in p.notes)
    assert c["refunds_dated_at_order"] >= 3 and any("dated after the as-of" in n for n in p.notes)
    assert sum(m.n for m in p.tables.final.values()) > 400 and len(p.tables.looks) >= 3
    assert_readout_parity(p, s)
    assert _json(spec, p) == _json(spec, s)


def test_three_arms_catalog_tables(spark: Any, tmp_path: Path) -> None:
    spec = _spec("three_arms", revenue_cap=0.95)
    paths = _files(spec, tmp_path, "parquet", seed=23)
    spark.sql("CREATE DATABASE IF NOT EXISTS armlock_readout")
    refs = {}
    for name, path in paths.items():
        spark.read.parquet(str(path)).write.mode("overwrite").saveAsTable(f"armlock_readout.{name}")
        refs[name] = f"table:armlock_readout.{name}"
    p = PandasEngine().readout(spec, _inputs(paths), None, lambda n: None)
    s = _spark_engine(spark).readout(spec, _inputs(refs), None, lambda n: None)
    assert p.tables.counts == s.tables.counts and p.tables.counts["units_capped"] > 0
    # notes name their input: the file name for pandas, the table for Spark
    rename = {f"{name}.parquet": ref for name, ref in refs.items()}

    def named(notes: list[str]) -> list[str]:
        for old, new in rename.items():
            notes = [n.replace(old, new) for n in notes]
        return notes

    assert named(p.notes) == s.notes and named(p.audit.notes) == s.audit.notes
    p.notes, p.audit.notes = s.notes, s.audit.notes
    assert_readout_parity(p, s)
    assert _json(spec, p) == _json(spec, s)


def test_cli_ninety_ten_by_customer_csv_gz(spark: Any, tmp_path: Path) -> None:
    # `armlock readout --engine spark` gives the JSON the pandas engine gives. In this process, so the
    # command finds the test's active SparkSession instead of starting a new one (tests/engines/
    # test_spark_cli.py starts one from the command line for the audit).
    from armlock.cli import app

    spec = _spec("ninety_ten", orders={"unit_id": "", "customer": "customer_key",
                                        "attributed": "attributed_channel"})
    (tmp_path / "t.toml").write_text(_toml("ninety_ten", spec.salt, by_customer=True), encoding="utf-8")
    paths = _files(spec, tmp_path, "csv.gz", seed=22, by_customer=True)
    out = {}
    for engine in ("pandas", "spark"):
        r = CliRunner().invoke(app, ["readout", "--spec", str(tmp_path / "t.toml"), "--visits", str(paths["visits"]),
                                     "--orders", str(paths["orders"]), "--exposures", str(paths["exposures"]),
                                     "--identities", str(paths["identities"]), "--spend", "1000",
                                     "--format", "json", "--engine", engine, "--out", str(tmp_path / f"{engine}.json")])
        assert r.exit_code in (0, 3), r.output
        out[engine] = json.loads((tmp_path / f"{engine}.json").read_text(encoding="utf-8"))
        out[engine].pop("generated_at")
    assert out["pandas"] == out["spark"]
    notes = " ".join(out["pandas"]["input_notes"])
    assert "more than one arm" in notes and "customer key has no visitor id" in notes


def test_same_errors_for_bad_orders(spark: Any, tmp_path: Path) -> None:
    spec = _spec("two_arms", covariates=[])
    paths = _files(spec, tmp_path, "csv", seed=24)
    o = pd.read_csv(paths["orders"], dtype=str)
    bad_rev = o.copy()
    bad_rev.loc[[4, 9], "revenue"] = "ten"
    bad_rev.to_csv(tmp_path / "bad_revenue.csv", index=False)
    o.drop(columns=["order_time"]).to_csv(tmp_path / "no_time.csv", index=False)
    msgs: dict[str, list[str]] = {}
    for bad in ("bad_revenue.csv", "no_time.csv", "missing.csv"):
        inputs = Inputs(paths["visits"], orders=tmp_path / bad)
        for engine in (PandasEngine(), _spark_engine(spark)):
            with pytest.raises(InputError) as exc:
                engine.readout(spec, inputs, None, lambda n: None)
            msgs.setdefault(bad, []).append(str(exc.value))
        assert msgs[bad][0] == msgs[bad][1], bad
    assert "column 'revenue' has 2 value(s) that are not numbers (first: lines 6, 11" in msgs["bad_revenue.csv"][0]
    assert "column 'order_time' not found in the orders file" in msgs["no_time.csv"][0]


def _toml(layout: str, salt: str, by_customer: bool = False) -> str:
    """The spec of `_spec(layout)` as a TOML file (the CLI reads a file)."""
    key = 'unit_id = ""\ncustomer = "customer_key"\n' if by_customer else ""
    arms = "".join(f'[[arms]]\nname = "{a["name"]}"\nweight = {a["weight"]}\n' for a in LAYOUTS[layout])
    return (f'name = "readout-{layout}"\nsalt = "{salt}"\nstart = "2026-01-05T00:00:00Z"\n{arms}'
            '[audit]\ncovariates = ["pre_orders"]\n[readout]\ncovariates = ["pre_orders", "pre_revenue"]\n'
            f'[readout.orders]\n{key}attributed = "attributed_channel"\n')


def test_decimal_revenue_parity(spark: Any, tmp_path: Path) -> None:
    """Revenue and a covariate as DECIMAL (a warehouse's money type): both engines read the nearest
    double of each amount (`audit.read.decimal_floats`, Spark's own cast) and agree bit for bit."""
    from decimal import Decimal

    import pyarrow as pa
    import pyarrow.parquet as pq

    spec = _spec("two_arms")
    paths = _files(spec, tmp_path, "parquet", seed=25)
    for key, cols in (("orders", ["revenue"]), ("visits", ["pre_revenue"])):
        t = pq.read_table(paths[key])
        for c in cols:
            cents = [None if v is None or v != v else Decimal(round(v * 100)).scaleb(-2) for v in t.column(c).to_pylist()]
            t = t.set_column(t.schema.get_field_index(c), c, pa.array(cents, pa.decimal128(12, 2)))
        pq.write_table(t, paths[key])
    inputs = _inputs(paths)
    p = PandasEngine().readout(spec, inputs, None, lambda n: None)
    s = _spark_engine(spark).readout(spec, inputs, None, lambda n: None)
    assert sum(m.n for m in p.tables.final.values()) > 400
    assert_readout_parity(p, s)
    assert _json(spec, p) == _json(spec, s)
