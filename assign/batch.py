"""Arms for one id or for millions: the contract applied with no per-row overhead beyond the hash."""

from __future__ import annotations

from bisect import bisect_right
from collections.abc import Iterable, Sequence
from itertools import repeat

import xxhash

from .contract import SEED, SEPARATOR, bucket, bucket_of_hash, hash_thresholds, key_bytes
from .spec import Spec

_hash = xxhash.xxh64_intdigest
_encode = str.encode


def arm_for(spec: Spec, unit_id: str) -> str | None:
    """The arm of one unit, or None for an empty id.

    >>> from armlock.assign.spec import Spec
    >>> s = Spec(name="t", salt="s1", start="2026-01-01T00:00:00Z",
    ...          arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
    >>> arm_for(s, "visitor-1") in ("holdout", "exposed")
    True
    """
    if not isinstance(unit_id, str):
        raise TypeError(
            f"arm_for() takes a str unit id, got {type(unit_id).__name__}: {unit_id!r}; "
            "ids are hashed byte-exact, so convert them to text the way your site stores them"
        )
    if unit_id == "":
        return None
    b = bucket(spec.salt, unit_id)
    return spec.arm_names[bisect_right(spec.cumulative, b)]


def _keys_careful(salt: str, ids: Sequence[object]) -> list[bytes]:
    """The slow path: lone surrogates as U+FFFD; missing ids get a placeholder key."""
    _missing_positions(ids)  # raises TypeError for ids that are neither str nor missing
    return [key_bytes(salt, u) if u.__class__ is str else b"" for u in ids]


def _missing_positions(ids: Sequence[object]) -> list[int]:
    """Positions of ids that get no arm: None, '' and float NaN; anything else non-str is an error."""
    out = []
    for i, u in enumerate(ids):
        if u.__class__ is str:
            if u == "":
                out.append(i)
        elif u is None or (isinstance(u, float) and u != u):
            out.append(i)
        else:
            raise TypeError(f"id at position {i} is {type(u).__name__} {u!r}, not str")
    return out


def hashes_many(salt: str, ids: Sequence[str]) -> list[int]:
    """XXH64 (seed 42) of every salted key; meaningless for missing ids (see assign_many)."""
    h, prefix, seed = _hash, salt + SEPARATOR, SEED
    try:
        return [h((prefix + u).encode(), seed) for u in ids]
    except (TypeError, UnicodeEncodeError):
        return list(map(_hash, _keys_careful(salt, ids), repeat(SEED)))


def _blank_missing(ids: Sequence[object], *columns: list) -> None:
    if "" in ids or not all(u.__class__ is str for u in ids):
        for i in _missing_positions(ids):
            for col in columns:
                col[i] = None


def assign_many(spec: Spec, ids: Iterable[str | None]) -> list[str | None]:
    """Arms for many ids, in order; None, '' (and NaN) get None. Raises TypeError on other types.

    The fast path is one comprehension per batch: key -> hash, compared with precomputed hash
    thresholds (no bucket arithmetic per row); any id that is not a plain str (None, NaN, a lone
    surrogate) sends the batch down the careful path, which gives the same answers.
    """
    seq = ids if isinstance(ids, (list, tuple)) else list(ids)
    thresholds = hash_thresholds(spec.cumulative)
    names = spec.arm_names
    out: list[str | None]
    h, prefix, seed = _hash, spec.salt + SEPARATOR, SEED
    try:
        # Inline comprehensions: measurably faster than chained map() over bound methods.
        if len(names) == 2:
            t, a0, a1 = thresholds[0], names[0], names[1]
            out = [a0 if h((prefix + u).encode(), seed) < t else a1 for u in seq]  # type: ignore[operator]
        elif len(names) == 3:
            t0, t1, (a0, a1, a2) = thresholds[0], thresholds[1], names
            out = [a0 if (x := h((prefix + u).encode(), seed)) < t0 else a1 if x < t1 else a2  # type: ignore[operator]
                   for u in seq]
        else:
            out = [names[bisect_right(thresholds, h((prefix + u).encode(), seed))] for u in seq]  # type: ignore[operator]
        if "" in seq:
            _blank_missing(seq, out)
    except (TypeError, UnicodeEncodeError):
        out = [names[bisect_right(thresholds, x)] for x in map(_hash, _keys_careful(spec.salt, seq), repeat(SEED))]
        _blank_missing(seq, out)
    return out


def buckets_and_arms(spec: Spec, ids: Sequence[str | None]) -> tuple[list[int | None], list[str | None]]:
    """Bucket and arm of every id (None for missing ids), for the `assign` command's output."""
    buckets: list[int | None] = [bucket_of_hash(h) for h in hashes_many(spec.salt, ids)]  # type: ignore[arg-type]
    cum, names = spec.cumulative, spec.arm_names
    # every bucket is an int here (a missing id hashed a placeholder key); _blank_missing clears them below
    arms: list[str | None] = [names[bisect_right(cum, b)] for b in buckets]  # type: ignore[type-var]
    _blank_missing(ids, buckets, arms)
    return buckets, arms


def arms_to_keep(spec: Spec, only: list[str]) -> set[str] | None:
    """The arm names that --only selects (an arm name, or a role naming every arm with it); None = all.
    A value that is neither is a ValueError naming the arms and roles."""
    if not only:
        return None
    keep: set[str] = set()
    roles = {"holdout": spec.holdout_arms, "exposed": spec.exposed_arms}
    for value in only:
        if value in spec.arm_names:
            keep.add(value)
        elif value in roles:
            keep.update(roles[value])
        else:
            raise ValueError(f"{value!r} is neither an arm of the spec ({', '.join(spec.arm_names)}) "
                             "nor a role (holdout, exposed)")
    return keep
