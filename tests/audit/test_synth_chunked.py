"""The chunked writer of invented logs: the audit reads it, arms by the contract, exact rows, same seed same files, flat memory."""

from __future__ import annotations

import hashlib
import json
import tracemalloc
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from armlock.assign import arm_for, spec_from_dict
from armlock.audit.run import run_audit
from armlock.audit.synth import _ids
from armlock.audit.synth_chunked import hex_ids, write_chunked

SPEC = spec_from_dict({"name": "chunked", "salt": "chunked-salt", "start": "2026-03-02T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}]})


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def small(tmp_path_factory: pytest.TempPathFactory):
    d = tmp_path_factory.mktemp("chunked")
    # 12,345 units and 98,765 rows in chunks of 4,000: neither count is a whole number of chunks
    return write_chunked(SPEC, d, units=12_345, exposure_rows=98_765, chunk_rows=4_000, seed=3)


def test_exact_rows_row_groups_and_invented_note(small) -> None:
    e = pq.ParquetFile(small.paths["exposures"])
    v = pq.ParquetFile(small.paths["visits"])
    assert e.metadata.num_rows == 98_765 and e.metadata.num_row_groups == 25  # 24 full chunks + 2,765 rows
    assert v.metadata.num_rows == 12_345 and v.metadata.num_row_groups == 4
    assert pq.ParquetFile(small.paths["identities"]).metadata.num_rows == small.truth["links"]
    note = json.loads(e.schema_arrow.metadata[b"armlock.synthetic"])
    assert note["note"].startswith("Invented data") and note["seed"] == 3


def test_arms_follow_the_contract_and_only_the_exposed_arm_is_reached(small) -> None:
    v = pq.read_table(small.paths["visits"]).to_pandas()
    assert v["unit_id"].is_unique and v["first_seen"].is_monotonic_increasing
    rows = v.sample(2000, random_state=0)
    assert [arm_for(SPEC, u) for u in rows["unit_id"]] == rows["arm"].astype(str).tolist()
    e = pq.read_table(small.paths["exposures"]).to_pandas()
    assert e["event_time"].is_monotonic_increasing  # sorted, as a vendor's export
    m = e.merge(v[["unit_id", "first_seen", "arm"]], on="unit_id", how="left", validate="many_to_one")
    assert m["arm"].notna().all() and set(m["arm"].astype(str)) == {"exposed"}
    assert (m["event_time"] >= m["first_seen"]).all()  # no row before its unit's first visit
    assert m["unit_id"].nunique() <= small.truth["reached_units"]
    assert set(e["event_kind"].astype(str)) == {"impression", "click"}


def test_the_audit_reads_it_clean_and_finds_a_seeded_leak(small, tmp_path: Path) -> None:
    rep = run_audit(SPEC, **{k: str(p) for k, p in small.paths.items()})
    status = {c.id: c.status for c in rep.checks}
    assert status["srm"] == "pass" and status["integrity"] == "pass" and status["leakage"] == "pass", status
    figs = {c.id: c.figures for c in rep.checks}
    assert figs["srm"]["units"].value == 12_345
    assert figs["leakage"]["id_match_rate"].value == 1.0
    leaky = write_chunked(SPEC, tmp_path, units=12_345, exposure_rows=98_765, chunk_rows=4_000, seed=3, leak=0.03)
    rep = run_audit(SPEC, **{k: str(p) for k, p in leaky.paths.items()})
    leak = next(c for c in rep.checks if c.id == "leakage")
    assert leak.status == "fail"
    assert 0 < leak.figures["holdout_leak_units"].value <= leaky.truth["leaked_units"]


def test_ids_are_those_of_the_in_memory_generator() -> None:
    codes = np.array([0, 1, 2, 12_345, (1 << 39) + 5, 10**9])
    assert hex_ids(codes).to_pylist() == _ids(codes, "v").tolist()
    assert hex_ids(codes, b"c-").to_pylist() == _ids(codes, "c-").tolist()


def test_same_seed_same_files_other_seed_other_files(small, tmp_path: Path) -> None:
    again = write_chunked(SPEC, tmp_path / "a", units=12_345, exposure_rows=98_765, chunk_rows=4_000, seed=3)
    other = write_chunked(SPEC, tmp_path / "b", units=12_345, exposure_rows=98_765, chunk_rows=4_000, seed=4)
    for name in ("visits", "exposures", "identities"):
        assert _digest(again.paths[name]) == _digest(small.paths[name]), name
        assert _digest(other.paths[name]) != _digest(small.paths[name]), name


def _peak_bytes(directory: Path, rows: int) -> int:
    tracemalloc.start()
    try:
        write_chunked(SPEC, directory, units=20_000, exposure_rows=rows, chunk_rows=20_000, seed=1)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_memory_does_not_grow_with_the_rows(tmp_path: Path) -> None:
    """A ratio of peak traced memory (numpy and Python allocations, where every chunk's columns and the
    Arrow arrays built on them live), not a timing: twice the exposure rows, about the same peak."""
    small_peak = _peak_bytes(tmp_path / "a", 200_000)
    large_peak = _peak_bytes(tmp_path / "b", 400_000)
    assert large_peak / small_peak < 1.5, (small_peak, large_peak)
    # what the bound protects against: the rows themselves would need far more than one chunk
    assert small_peak < 200_000 * 8 * np.dtype(np.int64).itemsize


def test_microsecond_times(tmp_path: Path) -> None:
    logs = write_chunked(SPEC, tmp_path, units=1_000, exposure_rows=5_000, chunk_rows=1_000, time_unit="us")
    us = pq.read_table(logs.paths["exposures"]).column("event_time").cast("int64").to_numpy()
    assert (np.diff(us) >= 0).all() and (us % 1000 != 0).mean() > 0.99  # not whole milliseconds
    with pytest.raises(ValueError, match="ms or us"):
        write_chunked(SPEC, tmp_path, units=1_000, exposure_rows=5_000, time_unit="s")


def test_bad_sizes_are_refused(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="units >= 10"):
        write_chunked(SPEC, tmp_path, units=5, exposure_rows=10)
    with pytest.raises(ValueError, match="multiple of 8"):
        write_chunked(SPEC, tmp_path, units=1000, exposure_rows=10, chunk_rows=100 + 3)


def test_the_large_run_script_at_a_tiny_size(tmp_path: Path) -> None:
    """scripts/large_run.py end to end (2,000 units, 30,000 rows): both steps measured, the logs removed."""
    import subprocess
    import sys

    script = Path(__file__).resolve().parents[2] / "scripts" / "large_run.py"
    results = tmp_path / "figures.json"
    run = subprocess.run([sys.executable, str(script), "--units", "2000", "--rows", "30000", "--chunk-rows", "8000",
                          "--dir", str(tmp_path / "logs"), "--results", str(results), "--keep-free", "0"],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stderr
    assert "| audit |" in run.stdout and "verdict pass" in run.stdout
    figures = json.loads(results.read_text())
    assert figures["steps"]["audit"]["units_counted"] == 2000 and figures["steps"]["audit"]["peak_rss_mb"] > 0
    assert not (tmp_path / "logs").exists()  # deleted without --keep
