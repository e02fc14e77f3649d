"""Property tests (hypothesis): the assigner is total, deterministic and respects the weights."""

from __future__ import annotations

from bisect import bisect_right

from hypothesis import given, settings
from hypothesis import strategies as st

from armlock.assign import Spec, arm_for, assign_many, bucket, buckets_and_arms
from armlock.assign.contract import BUCKETS, bucket_of_hash, cumulative, hash_thresholds


@st.composite
def specs(draw: st.DrawFn) -> Spec:
    k = draw(st.integers(2, 5))
    cuts = sorted(draw(st.lists(st.integers(1, BUCKETS - 1), min_size=k - 1, max_size=k - 1, unique=True)))
    bounds = [0, *cuts, BUCKETS]
    weights = [b - a for a, b in zip(bounds, bounds[1:])]
    salt = draw(st.text(min_size=1, max_size=20).filter(lambda s: ":" not in s and all(ord(c) >= 32 and ord(c) != 127 for c in s)))
    arms = [{"name": "holdout", "weight": weights[0]}] + [
        {"name": f"exposed_{i}", "weight": w} for i, w in enumerate(weights[1:])
    ]
    return Spec(name="prop", salt=salt, start="2026-01-01T00:00:00Z", arms=arms)


@settings(max_examples=200, deadline=None)
@given(specs(), st.lists(st.text(max_size=40), max_size=50))
def test_total_and_deterministic(spec: Spec, ids: list[str]) -> None:
    first = assign_many(spec, ids)
    assert first == assign_many(spec, list(ids)) == [arm_for(spec, i) for i in ids]
    for uid, arm in zip(ids, first):
        assert (arm is None) == (uid == "")
        assert arm is None or arm in spec.arm_names


@settings(max_examples=300, deadline=None)
@given(specs(), st.integers(0, (1 << 64) - 1))
def test_hash_thresholds_equal_bucket_rule(spec: Spec, h: int) -> None:
    # The batch fast path (thresholds on the raw hash) must agree with the contract's bucket rule.
    cum = cumulative(spec.weights)
    assert bisect_right(hash_thresholds(cum), h) == bisect_right(cum, bucket_of_hash(h))


@settings(max_examples=100, deadline=None)
@given(specs(), st.integers(0, BUCKETS - 1))
def test_arm_owns_its_basis_points(spec: Spec, b: int) -> None:
    # Arm i owns exactly `weight_i` buckets: [cum_{i-1}, cum_i).
    i = bisect_right(spec.cumulative, b)
    lo = spec.cumulative[i - 1] if i else 0
    assert lo <= b < spec.cumulative[i]


@settings(max_examples=20, deadline=None)
@given(specs())
def test_observed_shares_follow_weights(spec: Spec) -> None:
    n = 20_000
    ids = [f"u{i}" for i in range(n)]
    arms = assign_many(spec, ids)
    for a in spec.arms:
        share = arms.count(a.name) / n
        p = a.weight / BUCKETS
        assert abs(share - p) <= 5 * (p * (1 - p) / n) ** 0.5 + 1e-9  # 5 binomial SE


@given(st.text(max_size=30))
def test_bucket_range_and_batch_agree(uid: str) -> None:
    spec = Spec(name="b", salt="s", start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 1}, {"name": "exposed", "weight": 9999}])
    buckets, _ = buckets_and_arms(spec, [uid])
    if uid:
        assert 0 <= bucket("s", uid) < BUCKETS and buckets == [bucket("s", uid)]
    else:
        assert buckets == [None]


def test_wrong_types() -> None:
    import pytest

    spec = Spec(name="b", salt="s", start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
    with pytest.raises(TypeError, match="takes a str unit id, got int"):
        arm_for(spec, 123)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="str unit_id, got str and bytes"):
        bucket("s", b"x")  # type: ignore[arg-type]
    assert assign_many(spec, ["a", None, float("nan"), ""])[1:] == [None, None, None]
    with pytest.raises(TypeError, match="position 1 is int"):
        assign_many(spec, ["a", 5])  # type: ignore[list-item]
