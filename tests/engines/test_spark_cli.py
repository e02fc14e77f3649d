"""`armlock audit --engine spark` end to end: a fresh process starts its own local session; same JSON as pandas."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from armlock.assign import load_spec
from armlock.audit.synth import generate, write_logs
from tests.cli.cli_run import run_cli

pytestmark = pytest.mark.spark


def test_cli_spark_engine_matches_pandas(spark: Any, tmp_path: Path) -> None:
    # `spark` only checks PySpark and Java are there (it fails under CI=true when they are not)
    assert run_cli(tmp_path, "init", "cli-parity", "--holdout-share", "0.1", "--out", "t.toml").returncode == 0
    spec = load_spec(tmp_path / "t.toml")
    paths = write_logs(generate(spec, units=800, days=21, seed=4, faults=("leakage",)), tmp_path, "csv.gz")
    out = {}
    for engine in ("pandas", "spark"):
        extra = ["--spark-master", "local[1]", "--spark-conf", "spark.ui.enabled=false",
                 "--spark-conf", "spark.sql.shuffle.partitions=1"] if engine == "spark" else []
        r = run_cli(tmp_path, "audit", "--spec", "t.toml", "--visits", str(paths["visits"]),
                    "--exposures", str(paths["exposures"]), "--identities", str(paths["identities"]),
                    "--format", "json", "--engine", engine, *extra)
        assert r.returncode == 3, r.stderr[-2000:]  # leakage fails
        out[engine] = json.loads(r.stdout)
        out[engine].pop("generated_at")
    assert out["pandas"] == out["spark"]
