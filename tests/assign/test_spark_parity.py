"""Spark parity: the printed Spark SQL expression, run by a real local PySpark, equals Python.

The reference here is Apache Spark's own built-in xxhash64 (seed 42), not our code.
"""

from __future__ import annotations

import random

import pytest

from armlock.assign import Spec, buckets_and_arms
from armlock.assign.sql import spark_arm_expr, spark_bucket_expr
from tests.conftest import layout_spec, load_vectors

# the `spark` fixture (one local session per run) is in tests/conftest.py
pytestmark = pytest.mark.spark


def _spark_eval(spark, spec: Spec, ids: list[str | None]) -> tuple[list, list]:  # type: ignore[no-untyped-def]
    from pyspark.sql.types import IntegerType, StringType, StructField, StructType

    schema = StructType([StructField("pos", IntegerType()), StructField("visitor id", StringType())])
    df = spark.createDataFrame(list(enumerate(ids)), schema)
    df.createOrReplaceTempView("ids")
    q = (f"SELECT pos, {spark_bucket_expr(spec, 'visitor id')} AS bucket, "
         f"{spark_arm_expr(spec, 'visitor id')} AS arm FROM ids ORDER BY pos")
    rows = spark.sql(q).collect()
    return [r["bucket"] for r in rows], [r["arm"] for r in rows]


def _random_ids(n: int, seed: int) -> list[str | None]:
    rng = random.Random(seed)
    alphabet = "abcXYZ019-_:,\"'\\ \n\té漢😀\u2028\u0301"
    out: list[str | None] = []
    for _ in range(n):
        r = rng.random()
        if r < 0.01:
            out.append("")
        elif r < 0.02:
            out.append(None)
        elif r < 0.5:
            out.append(f"{rng.getrandbits(128):032x}")
        else:
            out.append("".join(rng.choice(alphabet) for _ in range(rng.randint(1, 80))))
    return out


@pytest.mark.parametrize("layout", load_vectors()["layouts"], ids=lambda l: l["name"])
def test_spark_matches_vectors(spark, layout) -> None:  # type: ignore[no-untyped-def]
    spec = layout_spec(layout)
    ids = [c["id"] for c in layout["cases"]]
    buckets, arms = _spark_eval(spark, spec, ids)
    assert buckets == [c["bucket"] for c in layout["cases"]]
    assert arms == [c["arm"] for c in layout["cases"]]


@pytest.mark.parametrize(
    "arms",
    [[("holdout", 5000), ("exposed", 5000)], [("holdout", 1000), ("exposed", 9000)],
     [("holdout", 2000), ("exposed_a", 4000), ("exposed_b", 4000)]],
)
def test_spark_matches_python_on_10000_random_ids(spark, arms) -> None:  # type: ignore[no-untyped-def]
    spec = Spec(name="p", salt="parity-7f3a", start="2026-01-01T00:00:00Z",
                arms=[{"name": n, "weight": w} for n, w in arms])
    ids = _random_ids(10_000, seed=len(arms) * 1000 + arms[0][1])
    assert _spark_eval(spark, spec, ids) == buckets_and_arms(spec, ids)


def test_spark_with_hostile_salt_and_column_name(spark) -> None:  # type: ignore[no-untyped-def]
    # Quotes and backslashes in the salt must be escaped in the SQL literal, not break it.
    spec = Spec(name="h", salt="it's\\a \"salt\" `x`", start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 3000}, {"name": "exposed", "weight": 7000}])
    ids = _random_ids(500, seed=5)
    assert _spark_eval(spark, spec, ids) == buckets_and_arms(spec, ids)
