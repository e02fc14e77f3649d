"""Benchmarks of issue 5: the whole demo against one audit, the HTML report against JSON, history writes.

Goal: `armlock demo` under 30 s here. The demo runs twelve weekly audits, so its ratio to one
audit of the same logs (the baseline) shows where its time goes; the wall seconds are recorded
in `extra_info`. Ratios are printed by tests/benchmarks/ratios.py.
"""

from __future__ import annotations

import json
import re
import sqlite3
import time
from pathlib import Path

import pytest

from armlock.demo import SPEC_FILE, build_demo, weekly_as_of
from armlock.assign import load_spec
from armlock.shared.history import load, record
from armlock.audit.model import AuditReport
from armlock.audit.report_html import render_html
from armlock.audit.run import run_audit

pytestmark = pytest.mark.bench


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("demo-bench") / "demo"
    build_demo(d)
    return d


@pytest.mark.benchmark(group="demo")
def test_one_audit_baseline(benchmark, demo_dir: Path) -> None:  # type: ignore[no-untyped-def]
    spec = load_spec(demo_dir / SPEC_FILE)
    logs = demo_dir / "logs"
    rep = benchmark.pedantic(lambda: run_audit(spec, visits=logs / "visits.parquet",
                                               exposures=logs / "exposures.parquet",
                                               identities=logs / "identities.parquet",
                                               as_of=weekly_as_of()[-1]), rounds=2, iterations=1)
    assert rep.verdict == "fail"


@pytest.mark.benchmark(group="demo")
def test_whole_demo(benchmark, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    n = iter(range(100))

    def once() -> float:
        t = time.perf_counter()
        res = build_demo(tmp_path / f"d{next(n)}")
        assert res.verdict == "fail" and res.weeks == 12
        return time.perf_counter() - t

    seconds = benchmark.pedantic(once, rounds=2, iterations=1)
    benchmark.extra_info["demo_seconds"] = round(seconds, 2)
    benchmark.extra_info["target_seconds"] = 30


@pytest.fixture(scope="module")
def report_and_history(demo_dir: Path) -> tuple[AuditReport, list[dict]]:
    rep = AuditReport.model_validate(json.loads((demo_dir / "report.json").read_text(encoding="utf-8")))
    return rep, load(demo_dir / f"{SPEC_FILE}.history.sqlite", rep.fingerprint)


@pytest.mark.benchmark(group="report-html")
def test_json_report_baseline(benchmark, report_and_history) -> None:  # type: ignore[no-untyped-def]
    rep, _ = report_and_history
    assert benchmark(lambda: json.dumps(rep.to_json_dict()))


@pytest.mark.benchmark(group="report-html")
def test_html_report_with_six_charts(benchmark, report_and_history) -> None:  # type: ignore[no-untyped-def]
    rep, hist = report_and_history
    page = benchmark.pedantic(lambda: render_html(rep, hist), rounds=3, iterations=1)
    benchmark.extra_info["html_kb"] = len(page.encode("utf-8")) // 1024
    # six charts, each drawn twice (a wide drawing and a narrow one for phones)
    assert len(set(re.findall(r'data-chart="([^"]+)"', page))) == 12 and page.count('data-chart="') == 12


@pytest.mark.benchmark(group="history")
def test_bare_sqlite_insert_baseline(benchmark, tmp_path: Path, report_and_history) -> None:  # type: ignore[no-untyped-def]
    rep, _ = report_and_history
    blob = json.dumps(rep.to_json_dict())
    conn = sqlite3.connect(tmp_path / "bare.sqlite", isolation_level=None)
    conn.execute("CREATE TABLE t (k INTEGER PRIMARY KEY, v TEXT)")
    n = iter(range(10**9))

    def once() -> None:
        conn.execute("BEGIN IMMEDIATE")
        conn.execute("INSERT INTO t VALUES (?, ?)", (next(n), blob))
        conn.execute("COMMIT")

    benchmark(once)
    conn.close()


@pytest.mark.benchmark(group="history")
def test_history_record(benchmark, tmp_path: Path, report_and_history) -> None:  # type: ignore[no-untyped-def]
    rep, _ = report_and_history
    path = tmp_path / "h.sqlite"
    benchmark(lambda: record(path, rep))
    assert len(load(path, rep.fingerprint)) == 1  # every round replaced the same row
