"""The frozen vectors file: every runtime must reproduce it; no row may ever change."""

from __future__ import annotations

import hashlib

import pytest

from armlock.assign import arm_for, assign_many, bucket, buckets_and_arms
from armlock.assign.contract import hash64
from tests.conftest import VECTORS, layout_spec, load_vectors

# Adding layouts or ids is allowed (regenerate with make_vectors.py --write and update this
# digest); changing an existing row is a new contract and must never happen.
FROZEN_SHA256 = "2218ed76a390dbe75e31ec588b04917e93bc10adbb2012ed991a23c9f45fd817"

DATA = load_vectors()
CASES = [(lay["name"], i) for lay in DATA["layouts"] for i in range(len(lay["cases"]))]


def test_vectors_file_is_frozen() -> None:
    assert hashlib.sha256(VECTORS.read_bytes()).hexdigest() == FROZEN_SHA256


def test_vectors_cover_the_required_edge_cases() -> None:
    ids = [c["id"] for c in DATA["layouts"][0]["cases"]]
    assert "" in ids and any(len(i) > 5000 for i in ids)
    assert any(ord(ch) > 0xFFFF for i in ids for ch in i)  # astral
    assert any("\n" in i for i in ids) and any("," in i for i in ids) and any('"' in i for i in ids)
    assert {tuple(w for _, w in lay["arms"]) for lay in DATA["layouts"]} >= {(5000, 5000), (1000, 9000), (9000, 1000), (2000, 4000, 4000)}


@pytest.mark.parametrize(("layout", "index"), CASES)
def test_single_calls_reproduce_row(layout: str, index: int) -> None:
    lay = next(l for l in DATA["layouts"] if l["name"] == layout)
    case = lay["cases"][index]
    spec = layout_spec(lay)
    assert arm_for(spec, case["id"]) == case["arm"]
    if case["id"]:
        assert bucket(lay["salt"], case["id"]) == case["bucket"]
        assert f"{hash64(lay['salt'], case['id']):016x}" == case["hash"]


@pytest.mark.parametrize("layout", [l["name"] for l in DATA["layouts"]])
def test_batch_reproduces_layout(layout: str) -> None:
    lay = next(l for l in DATA["layouts"] if l["name"] == layout)
    spec = layout_spec(lay)
    ids = [c["id"] for c in lay["cases"]]
    assert assign_many(spec, ids) == [c["arm"] for c in lay["cases"]]
    buckets, arms = buckets_and_arms(spec, ids)
    assert buckets == [c["bucket"] for c in lay["cases"]]
    assert arms == [c["arm"] for c in lay["cases"]]
