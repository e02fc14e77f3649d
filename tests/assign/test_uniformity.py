"""Statistical checks of the split: uniform buckets, independent salts (scipy as the reference)."""

from __future__ import annotations

import pytest
from scipy.stats import chi2_contingency, chisquare

from armlock.assign import Spec, assign_many
from armlock.assign.batch import hashes_many
from armlock.assign.contract import bucket_of_hash

N = 1_000_000
IDS = [f"visitor-{i}" for i in range(N)]  # sequential ids: the worst case for a weak hash


@pytest.mark.parametrize("salt", ["a1", "spring-test", "0f9e8d7c6b5a49382716", "ß✓"])
def test_buckets_uniform_over_100_cells(salt: str) -> None:
    # Pearson chi-square goodness of fit (scipy.stats.chisquare) on 100 equal cells of the
    # 10,000 buckets; a fair hash does not reject at 0.001.
    counts = [0] * 100
    for h in hashes_many(salt, IDS):
        counts[bucket_of_hash(h) // 100] += 1
    assert sum(counts) == N
    assert chisquare(counts).pvalue > 0.001


def _spec(salt: str) -> Spec:
    return Spec(name="u", salt=salt, start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])


def test_two_salts_split_independently() -> None:
    # Chi-square test of independence on the 2x2 table of arms under two salts
    # (scipy.stats.chi2_contingency, without continuity correction).
    a = assign_many(_spec("test-one"), IDS)
    b = assign_many(_spec("test-two"), IDS)
    table = [[0, 0], [0, 0]]
    for x, y in zip(a, b):
        table[x == "exposed"][y == "exposed"] += 1
    assert chi2_contingency(table, correction=False).pvalue > 0.001


def test_same_salt_is_fully_dependent() -> None:
    # The control for the test above: a check that can fail.
    a = assign_many(_spec("test-one"), IDS[:20000])
    table = [[0, 0], [0, 0]]
    for x in a:
        table[x == "exposed"][x == "exposed"] += 1
    assert chi2_contingency(table, correction=False).pvalue < 1e-100
