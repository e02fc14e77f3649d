"""Engine parity: the DuckDB engine's tables, notes, counts and reports equal the pandas engine's, fault by fault.

The same cases as the Spark parity suite (tests/engines/test_spark_engine.py: every seeded fault,
clean logs, Parquet, CSV and CSV.gz, hostile ids, time formats, as-of cuts), plus what only a
streaming reader can get wrong: rows split across slices (tiny slices force it), duplicates that
straddle a slice's end, logs that are not sorted by time (read again, grouped by DuckDB), and
errors counted over the whole file, word for word. The reference outside the project here is
DuckDB's own joins and aggregates against pandas/pyarrow/numpy; no Spark, so these run by default.
"""

from __future__ import annotations

import gzip
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from armlock.assign import InputError, Spec
from armlock.shared import engine_duckdb_read
from armlock.shared.engine import Inputs, PandasEngine, canonical, select_engine
from armlock.shared.engine_duckdb import DuckDBEngine
from armlock.audit.synth import FAULTS, generate, write_logs

from .test_spark_engine import (
    CASES,
    _hostile_spec,
    _hostile_tables,
    _logs,
    _micros,
    _spec,
    _with_formats,
    assert_parity,
    assert_tables_equal,
)


def _both(spec: Spec, inputs: Inputs, as_of: date | None = None, **duck: Any) -> tuple[Any, Any]:
    p = PandasEngine().compute(spec, inputs, as_of, lambda n: None)
    d = DuckDBEngine(**duck).compute(spec, inputs, as_of, lambda n: None)
    return p, d


def _errors_of_both(spec: Spec, inputs: Inputs) -> list[str]:
    msgs = []
    for engine in (PandasEngine(), DuckDBEngine()):
        with pytest.raises(InputError) as exc:
            engine.compute(spec, inputs, None, lambda n: None)
        msgs.append(str(exc.value))
    return msgs


@pytest.fixture
def small_slices(monkeypatch: pytest.MonkeyPatch) -> None:
    """Slices of a few hundred rows, so every case crosses many slice boundaries."""
    monkeypatch.setattr(engine_duckdb_read, "BATCH_ROWS", 257)
    monkeypatch.setattr(engine_duckdb_read, "CSV_BLOCK", 1 << 14)


@pytest.mark.parametrize(("fault", "seed", "layout"), [*CASES, ("clean", 1, "two_arms")],
                         ids=[f"{f}-{s}-{lay}" for f, s, lay in [*CASES, ("clean", 1, "two_arms")]])
def test_parquet_parity(tmp_path: Path, fault: str, seed: int, layout: str) -> None:
    spec = _spec(layout, salt=f"parity-{seed}")
    paths = _logs(spec, fault, seed, tmp_path, "parquet")
    p, d = _both(spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
    assert sum(p.tables.split.units.values()) > 1000 and p.tables.leakage.rows > 3000
    assert_parity(spec, p, d)
    assert np.array_equal(p.tables.leakage.exposed_rows, d.tables.leakage.exposed_rows)


@pytest.mark.parametrize(("fault", "seed", "layout", "fmt"), [("all", 8, "three_arms", "csv.gz"),
                                                               ("clean", 1, "two_arms", "csv"),
                                                               ("leakage", 3, "ninety_ten", "parquet")])
def test_small_slices_with_as_of(tmp_path: Path, small_slices: None, fault: str, seed: int, layout: str,
                                 fmt: str) -> None:
    spec = _spec(layout, salt=f"parity-{seed}")
    paths = _logs(spec, fault, seed, tmp_path, fmt)
    p, d = _both(spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]), as_of=date(2026, 1, 20))
    assert d.counts["visits_after_as_of"] > 0 and d.counts["exposures_after_as_of"] > 0
    assert_parity(spec, p, d)


def _with_duplicates(spec: Spec, tmp_path: Path, shuffle: bool) -> dict[str, Path]:
    """Logs whose exposures repeat rows exactly: next to the original (as a re-sent upload), and
    with whole-second times (so unequal rows share a time); shuffled if asked."""
    logs = generate(spec, units=800, days=21, seed=31, faults=FAULTS, events_per_unit=4.0)
    e = logs.exposures
    tcol = spec.audit.exposures.time
    e[tcol] = pd.to_datetime(e[tcol], utc=True).dt.floor("s")
    rng = np.random.default_rng(5)
    again = e.iloc[np.flatnonzero(rng.random(len(e)) < 0.1)]
    e = pd.concat([e, again], ignore_index=True)
    if shuffle:
        e = e.iloc[rng.permutation(len(e))].reset_index(drop=True)
    else:
        e = e.sort_values(tcol, kind="stable").reset_index(drop=True)
    logs.exposures = e
    return write_logs(logs, tmp_path, "parquet")


@pytest.mark.parametrize("shuffle", [False, True], ids=["sorted", "unsorted"])
def test_duplicates_across_slices(tmp_path: Path, small_slices: None, shuffle: bool) -> None:
    spec = _spec("three_arms", salt="parity-dups")
    paths = _with_duplicates(spec, tmp_path, shuffle)
    p, d = _both(spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
    assert p.counts["exposure_duplicate_rows"] > 200
    assert_parity(spec, p, d)


def test_hostile_ids(tmp_path: Path) -> None:
    spec = _spec("two_arms")
    paths: dict[str, Path] = {}
    for name, table in _hostile_tables(spec).items():
        paths[name] = tmp_path / f"{name}.parquet"
        pq.write_table(table, paths[name])
    csv: dict[str, Path] = {}
    for name, table in _hostile_tables(spec, line_breaks=False).items():
        csv[name] = tmp_path / f"{name}.csv.gz"
        with gzip.open(csv[name], "wt", encoding="utf-8", newline="") as fh:
            table.to_pandas().to_csv(fh, index=False, date_format="%Y-%m-%dT%H:%M:%S.%fZ")
    spec = _hostile_spec(spec)
    for files in (paths, csv):
        p, d = _both(spec, Inputs(files["visits"], files["exposures"], files["identities"]))
        assert d.tables.leakage.rows > 500 and p.counts["empty_ids"] == 4
        assert_parity(spec, p, d)


def test_time_formats_parity(tmp_path: Path, small_slices: None) -> None:
    """Epoch seconds and milliseconds (text, integers, floats) and strftime patterns, read in slices."""
    spec = _spec("three_arms", salt="parity-formats")
    logs = generate(spec, units=800, days=21, seed=21, faults=FAULTS, events_per_unit=3.0)
    v, e, i = logs.visits.copy(), logs.exposures.copy(), logs.identities.copy()
    vc, ec, ic = spec.audit.visits.first_seen, spec.audit.exposures.time, spec.audit.identities.time
    vt, et, it = _micros(v[vc]), _micros(e[ec]), _micros(i[ic])
    cases = {
        "text": ([f"{u // 10**6}.{u % 10**6:06d}" for u in vt], [f"{u // 1000}.{u % 1000:03d}" for u in et],
                 ("epoch_seconds", "epoch_milliseconds"), "csv.gz"),
        "strftime": (pd.to_datetime(vt, unit="us", utc=True).dt.strftime("%d/%m/%Y %H:%M:%S.%f").tolist(),
                     pd.to_datetime(et, unit="us", utc=True).dt.strftime("%Y%m%d %H.%M.%S.%f").tolist(),
                     ("%d/%m/%Y %H:%M:%S.%f", "%Y%m%d %H.%M.%S.%f"), "csv"),
        "numbers": ((vt // 1000).tolist(), (et / 1e6).tolist(), ("epoch_milliseconds", "epoch_seconds"), "parquet"),
        "naive_iso": (v[vc].tolist(), pd.to_datetime(et, unit="us").dt.strftime("%Y-%m-%d %H:%M:%S.%f").tolist(),
                      ("iso8601", "iso8601"), "csv"),
    }
    for name, (vcol, ecol, (vf, ef), fmt) in cases.items():
        v2, e2, i2 = v.copy(), e.copy(), i.copy()
        v2[vc], e2[ec], i2[ic] = vcol, ecol, (it // 1000).tolist()
        paths = write_logs(type(logs)(visits=v2, exposures=e2, identities=i2), tmp_path / name, fmt)
        spec2 = _with_formats(spec, vf, ef, "epoch_milliseconds")
        p, d = _both(spec2, Inputs(paths["visits"], paths["exposures"], paths["identities"]))
        assert_parity(spec2, p, d)
        if name == "naive_iso":
            assert any("time(s) in 'event_time' have no zone" in n for n in d.notes), d.notes


def _exposure_csv(tmp_path: Path, cells: list[str], fmt: str = "iso8601") -> tuple[Spec, Inputs]:
    spec = _with_formats(_spec("two_arms"), "iso8601", fmt, "iso8601", bare=True)
    (tmp_path / "v.csv").write_text("unit_id,first_seen,arm\na,2026-01-06T00:00:00Z,holdout\n"
                                    "b,2026-01-06T00:00:00Z,exposed\n", encoding="utf-8")
    rows = [f"{'ab'[j % 2]},{c},c1,impression" for j, c in enumerate(cells)]
    c = spec.audit.exposures
    (tmp_path / "e.csv").write_text(f"{c.unit_id},{c.time},{c.campaign},{c.kind}\n" + "\n".join(rows) + "\n",
                                    encoding="utf-8")
    return spec, Inputs(tmp_path / "v.csv", tmp_path / "e.csv")


@pytest.mark.parametrize(("fmt", "bad", "said"), [
    ("iso8601", "next tuesday", "time(s) that are not ISO 8601"),
    ("epoch_milliseconds", "17676e8", "time(s) that are not epoch milliseconds"),
    ("iso8601", "1500-01-05T10:00:00Z", "outside the years 1678-2261"),
    ("%d/%m/%Y %H:%M", "31/02/2026 10:00", "time(s) that are not '%d/%m/%Y %H:%M'"),
])
def test_exposure_time_errors_counted_over_every_slice(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                       fmt: str, bad: str, said: str) -> None:
    good = {"iso8601": "2026-01-07T10:00:00Z", "epoch_milliseconds": "1767780000000"}.get(fmt, "07/01/2026 10:00")
    cells = [good] * 3000
    for j in (5, 1700, 2500, 2600, 2700, 2800, 2999):  # far apart: in different slices
        cells[j] = bad
    spec, inputs = _exposure_csv(tmp_path, cells, fmt)
    monkeypatch.setattr(engine_duckdb_read, "CSV_BLOCK", 1 << 13)
    msgs = _errors_of_both(spec, inputs)
    assert msgs[0] == msgs[1], msgs
    assert said in msgs[0] and "7 time(s)" in msgs[0] and "lines 7, 1702, 2502, 2602, 2702 (and 2 more)" in msgs[0]


def test_exposure_errors_match(tmp_path: Path) -> None:
    spec = _with_formats(_spec("two_arms"), "iso8601", "iso8601", "iso8601", bare=True)
    (tmp_path / "v.csv").write_text("unit_id,first_seen,arm\na,2026-01-06T00:00:00Z,holdout\n", encoding="utf-8")
    c = spec.audit.exposures
    pq.write_table(pa.table({c.unit_id: [1, 2], c.time: [None, 1767607200], c.campaign: ["c", "c"],
                             c.kind: ["click", "view"]}), tmp_path / "num.parquet")
    pq.write_table(pa.table({c.unit_id: [1.5], c.time: ["2026-01-06T00:00:00Z"], c.campaign: ["c"],
                             c.kind: ["click"]}), tmp_path / "float_ids.parquet")
    header = f"{c.unit_id},{c.time},{c.campaign},{c.kind}\n"
    (tmp_path / "cols.csv").write_text(header.replace(",", ";"), encoding="utf-8")
    (tmp_path / "broken.csv.gz").write_bytes(gzip.compress((header + "a,2026-01-06T00:00:00Z,c,click\n" * 500)
                                                           .encode())[:-30])
    for name in ("num.parquet", "float_ids.parquet", "cols.csv", "broken.csv.gz", "missing.csv"):
        msgs = _errors_of_both(spec, Inputs(tmp_path / "v.csv", tmp_path / name))
        assert msgs[0] == msgs[1], msgs


def test_set_aside_rows_and_kinds(tmp_path: Path, small_slices: None) -> None:
    """Empty ids, missing times, rows after the as-of day and unmapped kinds: counted over every slice."""
    spec = _spec("ninety_ten", salt="parity-aside")
    logs = generate(spec, units=600, days=14, seed=41, faults=("leakage",), events_per_unit=3.0)
    e = logs.exposures
    c = spec.audit.exposures
    e[c.time] = pd.to_datetime(e[c.time], utc=True)
    e[c.kind] = e[c.kind].astype(object)
    e[c.campaign] = e[c.campaign].astype(object)
    e.loc[e.index % 97 == 3, c.unit_id] = ""
    e.loc[e.index % 89 == 5, c.time] = pd.NaT
    e.loc[e.index % 83 == 7, c.kind] = "view"
    e.loc[e.index % 79 == 9, c.kind] = ""
    e.loc[e.index % 71 == 11, c.campaign] = None
    for fmt in ("parquet", "csv.gz"):
        paths = write_logs(logs, tmp_path / fmt.replace(".", "_"), fmt)
        p, d = _both(spec, Inputs(paths["visits"], paths["exposures"], paths["identities"]), as_of=date(2026, 1, 12))
        for key in ("exposure_empty_ids", "exposure_missing_time", "exposures_after_as_of"):
            assert d.counts[key] > 0, key
        assert_parity(spec, p, d)


def test_readout_parity(tmp_path: Path) -> None:
    from .test_spark_readout import _files, _inputs, _json, assert_readout_parity
    from .test_spark_readout import _spec as readout_spec

    for layout, fmt, kw in (("two_arms", "parquet", {"window": 14, "revenue_cap": 0.99}),
                            ("three_arms", "csv.gz", {"revenue_cap": 0.95})):
        spec = readout_spec(layout, **kw)
        inputs = _inputs(_files(spec, tmp_path / layout, fmt, seed=21))
        p = PandasEngine().readout(spec, inputs, date(2026, 2, 5), lambda n: None)
        d = DuckDBEngine().readout(spec, inputs, date(2026, 2, 5), lambda n: None)
        assert p.tables.counts["units_capped"] > 0 and sum(m.n for m in p.tables.final.values()) > 400
        assert_readout_parity(p, d)
        assert _json(spec, p) == _json(spec, d)


def test_select_engine_and_tables_are_canonical(tmp_path: Path) -> None:
    spec = _spec("two_arms")
    paths = _logs(spec, "leakage", 3, tmp_path, "parquet")
    eng = select_engine("duckdb", memory_limit="1GB", temp_directory=str(tmp_path / "spill"))
    assert isinstance(eng, DuckDBEngine) and eng.name == "duckdb"
    d = eng.compute(spec, Inputs(paths["visits"], paths["exposures"]), None, lambda n: None)
    p = PandasEngine().compute(spec, Inputs(paths["visits"], paths["exposures"]), None, lambda n: None)
    assert_tables_equal(canonical(p.tables), canonical(d.tables))


def test_memory_limit_too_small_is_an_error(tmp_path: Path) -> None:
    """A limit DuckDB cannot work in: an input error that says what to do, never a crash."""
    spec = _spec("two_arms", salt="parity-oom")
    paths = _with_duplicates(spec, tmp_path, shuffle=True)
    with pytest.raises(InputError) as exc:
        DuckDBEngine(memory_limit="1MB").compute(spec, Inputs(paths["visits"], paths["exposures"]), None,
                                                 lambda n: None)
    assert "--memory-limit" in str(exc.value) and "DuckDB" in str(exc.value)


def test_contract_arms_from_arrow_buffers_match_the_frozen_vectors() -> None:
    """The DuckDB engine hashes ids straight from Arrow buffers; its arms equal the frozen vectors
    (shared/vectors/assignment_vectors.json: XXH64 per the xxHash spec, seed 42, every layout) and
    the pandas engine's `hash_arms` on a sliced, non-ASCII column."""
    from armlock.shared.engine_duckdb import contract_arms
    from armlock.shared.engine_pandas import hash_arms

    from ..conftest import layout_spec, load_vectors

    checked = 0
    for layout in load_vectors()["layouts"]:
        spec = layout_spec(layout)
        # ids a file can hold: not empty, valid UTF-8 (the vectors' lone surrogates cannot be in Arrow text)
        cases = [c for c in layout["cases"] if c["id"] and c.get("arm") and _utf8(c["id"])]
        ids = pd.Series([c["id"] for c in cases], dtype="str")
        names = list(spec.arm_names)
        assert [names[i] for i in contract_arms(spec, ids)] == [c["arm"] for c in cases], layout["name"]
        checked += len(cases)
    assert checked > 50
    spec = _spec("three_arms")
    ids = pd.Series([f"v-{i}-\u00e9\U0001F600" for i in range(3000)], dtype="str").iloc[7:2900]
    assert np.array_equal(contract_arms(spec, ids), hash_arms(spec, ids))


def _utf8(text: str) -> bool:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def test_cli_default_engine_with_memory_limit_and_temp_dir(tmp_path: Path) -> None:
    """`armlock audit` runs the DuckDB engine by default and takes its two settings; they need it."""
    import json

    from typer.testing import CliRunner

    from armlock.assign import load_spec
    from armlock.cli import app

    spec_path = tmp_path / "t.toml"
    assert CliRunner().invoke(app, ["init", "t", "--out", str(spec_path)]).exit_code == 0
    spec = load_spec(spec_path)
    paths = write_logs(generate(spec, units=600, days=14, seed=3, faults=("leakage",)), tmp_path, "csv.gz")
    base = ["audit", "--spec", str(spec_path), "--visits", str(paths["visits"]), "--exposures", str(paths["exposures"]),
            "--format", "json"]
    out = {}
    for name, extra in (("duckdb", ["--memory-limit", "500MB", "--temp-dir", str(tmp_path / "spill")]),
                        ("pandas", ["--engine", "pandas"])):
        r = CliRunner().invoke(app, [*base, *extra, "--out", str(tmp_path / f"{name}.json")])
        assert r.exit_code in (0, 1, 3), r.output
        out[name] = json.loads((tmp_path / f"{name}.json").read_text(encoding="utf-8"))
        out[name].pop("generated_at")
    assert out["duckdb"] == out["pandas"]
    r = CliRunner().invoke(app, [*base, "--engine", "pandas", "--memory-limit", "1GB"])
    assert r.exit_code == 2 and "--memory-limit and --temp-dir need --engine duckdb" in r.output


def test_without_duckdb_the_error_says_what_to_install(tmp_path: Path) -> None:
    """As if the duckdb package were missing: an `Error:` naming it (exit 4), and --engine pandas still runs."""
    import subprocess
    import sys

    spec = _spec("two_arms")
    paths = _logs(spec, "clean", 1, tmp_path, "parquet")
    (tmp_path / "t.toml").write_text('name = "t"\nsalt = "parity-salt"\nstart = "2026-01-05T00:00:00Z"\n'
                                     '[[arms]]\nname = "holdout"\nweight = 5000\n'
                                     '[[arms]]\nname = "exposed"\nweight = 5000\n', encoding="utf-8")
    child = ("import sys; sys.modules['duckdb'] = None\nfrom armlock.cli import main\n"
             "sys.argv = ['armlock'] + sys.argv[1:]\nmain()\n")
    base = [sys.executable, "-c", child, "audit", "--spec", str(tmp_path / "t.toml"), "--visits", str(paths["visits"]),
            "--exposures", str(paths["exposures"]), "--format", "json", "--out", str(tmp_path / "r.json")]
    r = subprocess.run(base, capture_output=True, text=True, timeout=120, check=False)
    assert r.returncode == 4, r.stderr
    assert "Error: the DuckDB engine needs the duckdb package, which is not installed: pip install duckdb" in r.stderr
    assert "Traceback" not in r.stderr
    r = subprocess.run([*base, "--engine", "pandas"], capture_output=True, text=True, timeout=120, check=False)
    assert r.returncode in (0, 1, 3), r.stderr
