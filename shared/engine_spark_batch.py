"""Many small Spark aggregates in one job: `collect_together` unions them, `together` runs builders in rounds.

Each Spark action costs a job (with adaptive execution, one per shuffle stage): planning, code
generation, scheduling and a round trip to the driver, whatever the size of the answer. An audit
needs a few dozen small aggregates of the same cached frames; sent one by one they cost far more
than the work they do, on a laptop as on a cluster. Here they travel together: the aggregates of a
round are unioned (each keeps its own columns, the others are null) and collected at once, and
Spark runs their independent stages side by side.

A table builder is a generator: it yields the list of aggregates it needs next and receives their
rows (dicts, one per result row), as many rounds as its logic needs (a second pass that uses a
first pass's means, for instance), then returns its tables. `together` advances every builder one
round at a time, so each round of all builders is one collect.
"""

from __future__ import annotations

from collections.abc import Generator
from functools import reduce
from typing import Any

from pyspark.sql import DataFrame
from pyspark.sql import functions as F

Rows = list[dict[str, Any]]
Builder = Generator[list[DataFrame], list[Rows], Any]

_TAG = "_q"


def collect_together(frames: list[DataFrame]) -> list[Rows]:
    """The rows of each frame (as dicts of its own column names), from a single collect."""
    if not frames:
        return []
    names = [f.columns for f in frames]
    if len(frames) == 1:
        return [[r.asDict() for r in frames[0].collect()]]
    parts = [f.toDF(*[f"_q{i}_{j}" for j in range(len(cols))]).withColumn(_TAG, F.lit(i))
             for i, (f, cols) in enumerate(zip(frames, names))]
    union = reduce(lambda a, b: a.unionByName(b, allowMissingColumns=True), parts)
    out: list[Rows] = [[] for _ in frames]
    for r in union.collect():
        i = r[_TAG]
        out[i].append({c: r[f"_q{i}_{j}"] for j, c in enumerate(names[i])})
    return out


def together(*builders: Builder) -> list[Any]:
    """Run the builders side by side; returns what each returned, in order.

    Each round, the pending aggregates of every builder go to Spark as one collect; the rows are
    handed back to the builders in their order (a builder sees the effects of the builders before
    it in the same round, e.g. fields they set on shared state).
    """
    results: list[Any] = [None] * len(builders)
    pending: dict[int, list[DataFrame]] = {}

    def advance(i: int, rows: list[Rows] | None) -> None:
        try:
            pending[i] = next(builders[i]) if rows is None else builders[i].send(rows)
        except StopIteration as stop:
            results[i] = stop.value

    for i in range(len(builders)):
        advance(i, None)
    while pending:
        order = sorted(pending)
        asked = [pending.pop(i) for i in order]
        rows = collect_together([f for frames in asked for f in frames])
        at = 0
        for i, frames in zip(order, asked):
            advance(i, rows[at:at + len(frames)])
            at += len(frames)
    return results
