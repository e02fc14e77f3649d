"""Benchmarks: batch assignment of 1,000,000 UUID-like ids against two baselines in the same run.

Goal (ratios printed by tests/benchmarks/ratios.py): assign_many >= 0.8x the throughput of a
bare list comprehension over xxhash.xxh64_intdigest (the floor for Python), and faster than the
common md5 approach.
"""

from __future__ import annotations

import hashlib
import random
import uuid

import pytest
import xxhash

from armlock.assign import Spec, assign_many

pytestmark = pytest.mark.bench

N = 1_000_000
ROUNDS = dict(rounds=5, warmup_rounds=1, iterations=1)  # fixed, so the short CI mode is not 1 noisy round
SALT = "bench-salt-3f2a"
_rng = random.Random(7)
IDS = [str(uuid.UUID(int=_rng.getrandbits(128), version=4)) for _ in range(N)]
SPEC = Spec(name="bench", salt=SALT, start="2026-01-01T00:00:00Z",
            arms=[{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}])
SPEC3 = Spec(name="bench3", salt=SALT, start="2026-01-01T00:00:00Z",
             arms=[{"name": "holdout", "weight": 2000}, {"name": "exposed_a", "weight": 4000},
                   {"name": "exposed_b", "weight": 4000}])


@pytest.mark.benchmark(group="assign-1M")
def test_baseline_bare_xxh64_comprehension(benchmark) -> None:  # type: ignore[no-untyped-def]
    h = xxhash.xxh64_intdigest
    prefix = SALT + ":"
    out = benchmark.pedantic(lambda: [h((prefix + u).encode(), 42) for u in IDS], **ROUNDS)
    assert len(out) == N


@pytest.mark.benchmark(group="assign-1M")
def test_md5_modulo(benchmark) -> None:  # type: ignore[no-untyped-def]
    md5 = hashlib.md5
    prefix = SALT + ":"
    out = benchmark.pedantic(lambda: [int(md5((prefix + u).encode()).hexdigest(), 16) % 10000 for u in IDS], **ROUNDS)
    assert len(out) == N


@pytest.mark.benchmark(group="assign-1M")
def test_assign_many_two_arms(benchmark) -> None:  # type: ignore[no-untyped-def]
    out = benchmark.pedantic(assign_many, args=(SPEC, IDS), **ROUNDS)
    assert len(out) == N and 0.09 < out.count("holdout") / N < 0.11


@pytest.mark.benchmark(group="assign-1M")
def test_assign_many_three_arms(benchmark) -> None:  # type: ignore[no-untyped-def]
    out = benchmark.pedantic(assign_many, args=(SPEC3, IDS), **ROUNDS)
    assert len(out) == N and 0.19 < out.count("holdout") / N < 0.21
