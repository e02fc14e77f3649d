"""Shared fixtures: the frozen vectors file, small specs, and the one local SparkSession of a test run."""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from armlock.assign import Spec

IN_CI = os.environ.get("CI") == "true"
ROOT = Path(__file__).resolve().parents[1]
VECTORS = ROOT / "shared" / "vectors" / "assignment_vectors.json"


def load_vectors() -> dict[str, Any]:
    return json.loads(VECTORS.read_text(encoding="ascii"))


def layout_spec(layout: dict[str, Any]) -> Spec:
    return Spec(
        name=layout["name"],
        salt=layout["salt"],
        start="2026-01-01T00:00:00Z",
        arms=[{"name": n, "weight": w} for n, w in layout["arms"]],
    )


@pytest.fixture
def spec_50() -> Spec:
    return Spec(name="t", salt="test-salt", start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])


@pytest.fixture(scope="session")
def spark() -> Iterator[Any]:
    """One small local SparkSession for the whole run, tuned for many tiny audits rather than big data.

    local[2], one shuffle partition, no UI, no adaptive execution (which submits one job per shuffle
    stage) and no code generation: on inputs of a few thousand rows, compiling each query's Java code
    (Janino) costs more than running it interpreted; results are the same either way. The CLI test
    runs the engine in its own process with adaptive execution on (Spark's default).

    Skips when PySpark or Java is missing, except under CI=true, where the Spark tests must run.
    """
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        if IN_CI:
            pytest.fail("pyspark is not installed but CI=true requires the Spark tests")
        pytest.skip("pyspark not installed (pip install -e '.[test]')")
    if shutil.which("java") is None and not os.environ.get("JAVA_HOME"):
        if IN_CI:
            pytest.fail("no Java found; the Spark tests need Java 17")
        pytest.skip("no Java on this machine")
    session = (
        SparkSession.builder.master("local[2]")
        .appName("armlock-tests")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.sql.shuffle.partitions", "1")
        .config("spark.default.parallelism", "2")
        .config("spark.sql.adaptive.enabled", "false")
        .config("spark.sql.codegen.wholeStage", "false")
        .config("spark.sql.codegen.factoryMode", "NO_CODEGEN")
        .config("spark.driver.bindAddress", "127.0.0.1")
        .config("spark.sql.warehouse.dir", tempfile.mkdtemp(prefix="armlock-warehouse-"))
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()
