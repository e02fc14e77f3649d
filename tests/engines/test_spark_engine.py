"""Engine parity: the Spark engine's tables and report equal the pandas engine's, fault by fault.

Each case runs both engines on the same files (Parquet, CSV.gz, or catalog tables) and compares
every table of `audit.tables` (counts exactly, float sums to 1e-9 relative), the input notes and
set-aside counts, and the JSON reports (identical except their generation time). The reference
outside the project here is Apache Spark itself: its own CSV/Parquet readers, joins, aggregates
and native xxhash64 against pandas/pyarrow/numpy. One small local session (tests/conftest.py).
"""

from __future__ import annotations

import dataclasses
import gzip
from datetime import date
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from armlock.assign import InputError, Spec, arm_for, spec_from_dict
from armlock.shared.engine import Inputs, PandasEngine, canonical
from armlock.audit.run import build_report
from armlock.audit.synth import FAULTS, generate, write_logs

pytestmark = pytest.mark.spark

LAYOUTS = {
    "two_arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}],
    "ninety_ten": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}],
    "three_arms": [{"name": "holdout", "weight": 2000}, {"name": "exposed_a", "weight": 4000},
                   {"name": "exposed_b", "weight": 4000}],
}
# every fault alone, all together and clean; seeds and layouts rotate so that each layout appears
# several times. Parquet here; the CSV.gz cases add clean (two arms) and all faults (three arms),
# the catalog case all faults (90/10), so each of clean and all runs in more than one layout.
CASES = [
    ("browser_loss", 2, "ninety_ten"), ("leakage", 3, "three_arms"), ("pre_exposure", 4, "two_arms"),
    ("cookie_churn", 5, "ninety_ten"), ("imbalance", 6, "three_arms"), ("all", 7, "two_arms"),
]


def _spec(layout: str, salt: str = "parity-salt") -> Spec:
    return spec_from_dict({"name": f"parity-{layout}", "salt": salt, "start": "2026-01-05T00:00:00Z",
                           "arms": LAYOUTS[layout]})


def _logs(spec: Spec, fault: str, seed: int, directory: Path, fmt: str) -> dict[str, Path]:
    faults = FAULTS if fault == "all" else (() if fault == "clean" else (fault,))
    logs = generate(spec, units=1500, days=28, seed=seed, faults=faults, events_per_unit=3.0)
    return write_logs(logs, directory, fmt)


def _spark_engine(spark: Any) -> Any:
    from armlock.shared.engine_spark import SparkEngine

    return SparkEngine(session=spark)


def _frame_equal(a: pd.DataFrame, b: pd.DataFrame, what: str) -> None:
    pd.testing.assert_frame_equal(a.reset_index(), b.reset_index(), check_dtype=False, check_exact=False,
                                  rtol=1e-9, atol=0, obj=what)


def assert_tables_equal(a: Any, b: Any, path: str = "tables") -> None:
    """Field by field: frames to 1e-9 relative (counts are integers, so exactly), the rest exactly."""
    if a is None or b is None:
        assert a is b, path
        return
    if dataclasses.is_dataclass(a):
        for f in dataclasses.fields(a):
            if f.name in ("exposed_rows", "extra"):  # per-row arrays the readout borrows, not tables
                continue
            assert_tables_equal(getattr(a, f.name), getattr(b, f.name), f"{path}.{f.name}")
    elif isinstance(a, pd.DataFrame):
        _frame_equal(a, b, path)
    elif isinstance(a, dict):
        assert list(a) == list(b), path
        for key in a:
            assert_tables_equal(a[key], b[key], f"{path}[{key}]")
    else:
        assert a == b, path


def _both(spark: Any, spec: Spec, inputs: Inputs, spark_inputs: Inputs | None = None,
          as_of: date | None = None) -> tuple[Any, Any]:
    p = PandasEngine().compute(spec, inputs, as_of, lambda n: None)
    s = _spark_engine(spark).compute(spec, spark_inputs or inputs, as_of, lambda n: None)
    return p, s


def assert_parity(spec: Spec, p: Any, s: Any) -> None:
    assert_tables_equal(canonical(p.tables), canonical(s.tables))
    assert p.notes == s.notes
    assert p.counts == s.counts
    assert p.as_of == s.as_of
    rp, rs = build_report(spec, p).to_json_dict(), build_report(spec, s).to_json_dict()
    rp.pop("generated_at")
    rs.pop("generated_at")
    assert rp == rs


@pytest.mark.parametrize(("fault", "seed", "layout"), CASES, ids=[f"{f}-{s}-{lay}" for f, s, lay in CASES])
def test_parquet_parity(spark: Any, tmp_path: Path, fault: str, seed: int, layout: str) -> None:
    spec = _spec(layout, salt=f"parity-{seed}")
    paths = _logs(spec, fault, seed, tmp_path, "parquet")
    p, s = _both(spark, spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
    assert p.tables.split.units == s.tables.split.units and sum(p.tables.split.units.values()) > 1000
    assert_parity(spec, p, s)


@pytest.mark.parametrize(("fault", "seed", "layout"), [("all", 8, "three_arms"), ("clean", 1, "two_arms")])
def test_csv_gz_parity_with_as_of(spark: Any, tmp_path: Path, fault: str, seed: int, layout: str) -> None:
    spec = _spec(layout, salt=f"parity-{seed}")
    paths = _logs(spec, fault, seed, tmp_path, "csv.gz")
    p, s = _both(spark, spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]),
                 as_of=date(2026, 1, 20))
    assert s.counts["visits_after_as_of"] > 0 and s.counts["exposures_after_as_of"] > 0
    assert_parity(spec, p, s)


def test_catalog_tables_parity(spark: Any, tmp_path: Path) -> None:
    spec = _spec("ninety_ten")
    paths = _logs(spec, "all", 12, tmp_path, "parquet")
    spark.sql("CREATE DATABASE IF NOT EXISTS armlock_parity")
    refs = {}
    for name, path in paths.items():
        spark.read.parquet(str(path)).write.mode("overwrite").saveAsTable(f"armlock_parity.{name}")
        refs[name] = f"table:armlock_parity.{name}"
    p = PandasEngine().compute(spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]), None,
                               lambda n: None)
    s = _spark_engine(spark).compute(spec, Inputs(refs["visits"], refs["exposures"], refs["identities"]), None,
                                     lambda n: None)
    assert_tables_equal(canonical(p.tables), canonical(s.tables))
    assert p.counts == s.counts
    # notes name their input: the file name for pandas, the table for Spark
    assert [n.replace("visits.parquet", refs["visits"]).replace("exposures.parquet", refs["exposures"])
            .replace("identities.parquet", refs["identities"]) for n in p.notes] == s.notes


# -- hostile ids -------------------------------------------------------------------------------------

HOSTILE = ['he said "hi"', "a,b,c", "line\nbreak", "cr\rreturn", "astral \U0001F600\U00010348", "  padded  ",
           "NA", "null", "'single'", "back\\slash", "tab\tid", "\u00e9\u0301", "x" * 300]


def _hostile_tables(spec: Spec, line_breaks: bool = True) -> dict[str, pa.Table]:
    hostile = [h for h in HOSTILE if line_breaks or not any(c in h for c in "\r\n")]
    ids: list[str | None] = [f"{h}-{i}" for i in range(40) for h in hostile] + ["", None, "", None]
    n = len(ids)
    times = pd.date_range("2026-01-05T00:00:00Z", periods=n, freq="17min")
    arms = [arm_for(spec, i) if i else "holdout" for i in ids]
    arms[3], arms[5] = "ctrl", ""  # an unknown and an empty recorded arm
    visits = pa.table({"unit_id": pa.array(ids, pa.string()), "first_seen": pa.array(times),
                       "arm": arms, "browser_family": ["webkit", "gecko", None, "other"] * (n // 4),
                       "device": ["mobile", "desktop", ""] * (n // 3) + ["mobile"] * (n % 3),
                       "country": ["US"] * n, "landing_channel": ["direct", "email"] * (n // 2),
                       "pre_orders": [float(i % 4) for i in range(n)],
                       "pre_revenue": [None if i % 7 == 0 else (i % 13) * 10.25 for i in range(n)],
                       "spec_fingerprint": [spec.fingerprint] * n})
    exp_ids = [i for i in ids for _ in range(2)] + ["never \"seen\"," + ("\n" if line_breaks else ""), "🙂"]
    m = len(exp_ids)
    exposures = pa.table({"unit_id": pa.array(exp_ids, pa.string()),
                          "exposure_time": pa.array(pd.date_range("2026-01-04T12:00:00Z", periods=m, freq="11min")),
                          "campaign": ["c,1", "c\"2"] * (m // 2), "event_kind": ["impression", "click"] * (m // 2)})
    link_ids = [i for i in ids if i][:300] + ["not in visits \U0001F600", None]
    identities = pa.table({"unit_id": pa.array(link_ids, pa.string()),
                           "customer_key": [f"c-{j % 90}" if j % 50 else "" for j in range(len(link_ids))]})
    return {"visits": visits, "exposures": exposures, "identities": identities}


def test_hostile_ids_parquet(spark: Any, tmp_path: Path) -> None:
    spec = _spec("two_arms")
    paths = {}
    for name, table in _hostile_tables(spec).items():
        paths[name] = tmp_path / f"{name}.parquet"
        pq.write_table(table, paths[name])
    spec = _hostile_spec(spec)
    p, s = _both(spark, spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
    assert p.counts["empty_ids"] == 4 and p.tables.integrity.recorded_unknown == {"ctrl": 1}
    assert_parity(spec, p, s)


def test_hostile_ids_csv_gz(spark: Any, tmp_path: Path) -> None:
    # Line breaks inside quoted CSV fields are left to the Parquet case: the embedded reader
    # (pyarrow's CSV parser, newlines_in_values off for speed) refuses them with an input error.
    spec = _spec("two_arms")
    paths = {}
    for name, table in _hostile_tables(spec, line_breaks=False).items():
        frame = table.to_pandas()
        paths[name] = tmp_path / f"{name}.csv.gz"
        with gzip.open(paths[name], "wt", encoding="utf-8", newline="") as fh:
            frame.to_csv(fh, index=False, date_format="%Y-%m-%dT%H:%M:%S.%fZ")
    spec = _hostile_spec(spec)
    p, s = _both(spark, spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
    assert_parity(spec, p, s)


def _hostile_spec(spec: Spec) -> Spec:
    from armlock.assign import spec_from_dict as sfd

    d = spec.model_dump(mode="json")
    d.setdefault("audit", {})
    d["audit"]["exposures"] = {"unit_id": "unit_id", "time": "exposure_time", "campaign": "campaign",
                               "kind": "event_kind"}
    d["audit"]["identities"] = {"unit_id": "unit_id", "customer": "customer_key"}
    return sfd(d)


# -- errors ------------------------------------------------------------------------------------------

def _errors_of_both(spark: Any, spec: Spec, inputs: Inputs) -> list[str]:
    """The input error each engine gives for the same inputs (pandas first)."""
    msgs = []
    for engine in (PandasEngine(), _spark_engine(spark)):
        with pytest.raises(InputError) as exc:
            engine.compute(spec, inputs, None, lambda n: None)
        msgs.append(str(exc.value))
    return msgs


def test_same_errors(spark: Any, tmp_path: Path) -> None:
    spec = _spec("two_arms")
    pq.write_table(pa.table({"uid": ["a"], "first_seen": ["2026-01-06T00:00:00Z"]}), tmp_path / "v.parquet")
    bad = tmp_path / "t.csv"
    bad.write_text("unit_id,first_seen,arm\na,2026-01-06T00:00:00Z,holdout\nb,next tuesday,holdout\n",
                   encoding="utf-8")
    bare = _with_formats(spec, "iso8601", "iso8601", "iso8601", bare=True)  # reaches the bad time itself
    for s, path, said in ((spec, tmp_path / "v.parquet", "unit_id"), (bare, bad, "next tuesday"),
                          (spec, tmp_path / "missing.parquet", "missing.parquet")):
        msgs = _errors_of_both(spark, s, Inputs(path))
        assert msgs[0] == msgs[1] and said in msgs[0], msgs


# -- time formats ------------------------------------------------------------------------------------

def _with_formats(spec: Spec, visits: str, exposures: str, identities: str, bare: bool = False) -> Spec:
    d = spec.model_dump(mode="json")
    d.setdefault("audit", {})
    if bare:  # visits need only id, first-seen time and arm
        d["audit"].update(segments=[], covariates=[], categorical_covariates=[])
    d["audit"].setdefault("visits", {})["first_seen_format"] = visits
    d["audit"].setdefault("exposures", {})["time_format"] = exposures
    d["audit"].setdefault("identities", {})["time_format"] = identities
    return spec_from_dict(d)


def _micros(s: pd.Series) -> pd.Series:
    return pd.to_datetime(s, utc=True).dt.as_unit("us").astype("int64")


def test_time_formats_parity(spark: Any, tmp_path: Path) -> None:
    """Epoch seconds (decimal text), epoch milliseconds (integers and decimal text), strftime patterns
    and floats: both engines give the same tables, and the lossless ones the tables of ISO 8601 times."""
    spec = _spec("three_arms", salt="parity-formats")
    logs = generate(spec, units=800, days=21, seed=21, faults=FAULTS, events_per_unit=3.0)
    base = write_logs(logs, tmp_path / "iso", "parquet")
    iso_spec = _spec("three_arms", salt="parity-formats")
    ref = PandasEngine().compute(iso_spec, Inputs(base["visits"], base["exposures"], base["identities"]), None,
                                 lambda n: None)
    v, e, i = logs.visits.copy(), logs.exposures.copy(), logs.identities.copy()
    vc, ec, ic = spec.audit.visits.first_seen, spec.audit.exposures.time, spec.audit.identities.time
    vt, et, it = _micros(v[vc]), _micros(e[ec]), _micros(i[ic])  # the generator's times are whole milliseconds
    cases = {  # name: visits' and exposures' time columns, their formats, whether lossless (then equal to ISO)
        "text": ([f"{u // 10**6}.{u % 10**6:06d}" for u in vt], [f"{u // 1000}.{u % 1000:03d}" for u in et],
                 ("epoch_seconds", "epoch_milliseconds"), True),
        "strftime": (pd.to_datetime(vt, unit="us", utc=True).dt.strftime("%d/%m/%Y %H:%M:%S.%f").tolist(),
                     pd.to_datetime(et, unit="us", utc=True).dt.strftime("%Y%m%d %H.%M.%S.%f").tolist(),
                     ("%d/%m/%Y %H:%M:%S.%f", "%Y%m%d %H.%M.%S.%f"), True),
        "numbers": ((vt // 1000).tolist(), (et / 1e6).tolist(), ("epoch_milliseconds", "epoch_seconds"), False),
    }
    for name, (vcol, ecol, (vf, ef), lossless) in cases.items():
        v2, e2, i2 = v.copy(), e.copy(), i.copy()
        v2[vc], e2[ec], i2[ic] = vcol, ecol, (it // 1000).tolist()  # links: integer milliseconds
        fmt = "csv.gz" if name != "numbers" else "parquet"
        paths = write_logs(type(logs)(visits=v2, exposures=e2, identities=i2), tmp_path / name, fmt)
        spec2 = _with_formats(spec, vf, ef, "epoch_milliseconds")
        p, s = _both(spark, spec2, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
        assert_parity(spec2, p, s)
        if lossless:
            assert_tables_equal(canonical(ref.tables), canonical(p.tables))


@pytest.mark.parametrize(("fmt", "cell"), [("epoch_milliseconds", "17676e8"), ("epoch_seconds", "soon"),
                                           ("%d/%m/%Y %H:%M", "31/02/2026 10:00"), ("%d/%m/%Y %H:%M", "05/01/2026 10:60")])
def test_time_format_errors_match(spark: Any, tmp_path: Path, fmt: str, cell: str) -> None:
    spec = _with_formats(_spec("two_arms"), fmt, "iso8601", "iso8601", bare=True)
    good = "1767607200" if fmt == "epoch_seconds" else ("1767607200000" if fmt.startswith("epoch") else "05/01/2026 10:00")
    path = tmp_path / "v.csv"
    path.write_text(f"unit_id,first_seen,arm\na,{good},holdout\nb,{cell},holdout\nc,{cell},exposed\n", encoding="utf-8")
    msgs = _errors_of_both(spark, spec, Inputs(path))
    assert msgs[0] == msgs[1]
    assert "lines 3, 4" in msgs[0] and "first_seen_format" in msgs[0] and repr(cell) in msgs[0]


def test_strftime_directive_without_a_match_is_named(spark: Any, tmp_path: Path) -> None:
    spec = _with_formats(_spec("two_arms"), "%d %b %Y", "iso8601", "iso8601", bare=True)
    path = tmp_path / "v.csv"
    path.write_text("unit_id,first_seen,arm\na,05 Jan 2026,holdout\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"%b"):
        _spark_engine(spark).compute(spec, Inputs(path), None, lambda n: None)


# -- the engines' common ground: years 1678-2261, microseconds, decimals --------------------------------

@pytest.mark.parametrize("case", ["csv_iso_past", "csv_strftime_past", "parquet_future", "parquet_naive_past"])
def test_times_outside_the_range_same_error(spark: Any, tmp_path: Path, case: str) -> None:
    """The pandas engine holds nanoseconds since 1970 in 64 bits (years 1678-2261); Spark holds more.
    A time outside that range is an input error on both, word for word (it was accepted by Spark,
    or a traceback for years after 2262)."""
    import datetime as dt

    fmt = "%d/%m/%Y %H:%M" if "strftime" in case else "iso8601"
    spec = _with_formats(_spec("two_arms"), fmt, "iso8601", "iso8601", bare=True)
    if case.startswith("csv"):
        path = tmp_path / "v.csv"
        good, far = (("05/01/2026 10:00", "05/01/1500 10:00") if "strftime" in case
                     else ("2026-01-05T10:00:00Z", "1500-01-05T10:00:00.25Z"))
        path.write_text(f"unit_id,first_seen,arm\na,{good},holdout\nb,{far},holdout\nc,{far},exposed\n", encoding="utf-8")
    else:
        path = tmp_path / "v.parquet"
        tz = None if "naive" in case else dt.timezone.utc
        year = 2300 if "future" in case else 1500
        times = [dt.datetime(2026, 1, 5, 10, tzinfo=tz), dt.datetime(year, 1, 5, 10, tzinfo=tz),
                 dt.datetime(year, 1, 5, 10, tzinfo=tz)]
        pq.write_table(pa.table({"unit_id": ["a", "b", "c"], "first_seen": pa.array(times, pa.timestamp("us", tz and "UTC")),
                                 "arm": ["holdout", "holdout", "exposed"]}), path)
    msgs = _errors_of_both(spark, spec, Inputs(path))
    assert msgs[0] == msgs[1], msgs
    assert "2 time(s) outside the years 1678-2261" in msgs[0] and ("lines 3, 4" in msgs[0] or "rows 2, 3" in msgs[0])


def test_nanoseconds_and_decimals_parity(spark: Any, tmp_path: Path) -> None:
    """Digits below the microsecond are dropped by both engines (Spark's timestamps have none), so
    two exposure rows a few nanoseconds apart are one event logged twice on both; a decimal
    covariate is read as the nearest double on both."""
    from decimal import Decimal

    spec = _spec("ninety_ten", salt="parity-nanos")
    d = spec.model_dump(mode="json")
    d["audit"] = {"segments": [], "covariates": ["spend"], "categorical_covariates": [],
                  "exposures": {"unit_id": "unit_id", "time": "at", "campaign": "campaign", "kind": "kind"}}
    spec = spec_from_dict(d)
    n = 300
    ids = [f"n{i:04d}" for i in range(n)]
    base = pd.Timestamp("2026-01-06T00:00:00Z").value
    ns = [base + i * 3_600_000_000_000 + 987_654_321 for i in range(n)]
    pq.write_table(pa.table({"unit_id": ids, "first_seen": pa.array(ns, pa.timestamp("ns", "UTC")),
                             "arm": [arm_for(spec, u) for u in ids],
                             "spend": pa.array([Decimal(i * 37 % 1000).scaleb(-2) for i in range(n)],
                                               pa.decimal128(12, 2))}), tmp_path / "v.parquet")
    stamp = lambda t, extra: pd.Timestamp(t + extra).strftime("%Y-%m-%dT%H:%M:%S.%f") + f"{extra % 1000:03d}Z"  # noqa: E731
    rows = ["unit_id,at,campaign,kind"]
    for i in range(0, n, 3):  # each row twice, 1 ns and 2 ns later (the same microsecond)
        t = ns[i] - 987_654_321 + 5 * 3_600_000_000_000 + 123_456_000
        rows += [f"{ids[i]},{stamp(t, 1)},c1,impression", f"{ids[i]},{stamp(t, 2)},c1,impression"]
    (tmp_path / "e.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    p, s = _both(spark, spec, Inputs(tmp_path / "v.parquet", tmp_path / "e.csv"))
    assert_parity(spec, p, s)
    assert p.counts["exposure_duplicate_rows"] == n // 3
    assert p.tables.integrity.first_seen_min.endswith(".987654+00:00")
