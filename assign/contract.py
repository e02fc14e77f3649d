"""The frozen assignment contract: salted key -> XXH64(seed 42) -> bucket in [0, 10000) -> arm.

Why this module never changes: a visitor's arm must be the same in Python, the browser, Node and
Spark SQL, and must never change once a test runs. Every constant here is pinned by the checked-in
vectors file (shared/vectors/assignment_vectors.json, described in shared/CONTRACT.md); a change that moves any row is a new
contract, not a fix.
"""

from __future__ import annotations

import codecs
from bisect import bisect_right
from collections.abc import Sequence

import xxhash

SEED = 42  # Apache Spark's xxhash64() seed, so Spark can recompute arms natively
BUCKETS = 10_000  # basis points
SEPARATOR = ":"
_SPAN = 1 << 32


def _surrogates_as_javascript(err: UnicodeError) -> tuple[bytes, int]:
    """Encode surrogates as a JavaScript string would: a high+low pair as its astral code point,
    a lone surrogate as U+FFFD (what the browser's TextEncoder does)."""
    if not isinstance(err, UnicodeEncodeError):
        raise err
    text, i, out = err.object, err.start, bytearray()
    while i < err.end:
        c = ord(text[i])
        nxt = ord(text[i + 1]) if i + 1 < len(text) else 0
        if 0xD800 <= c <= 0xDBFF and 0xDC00 <= nxt <= 0xDFFF:
            out += chr(0x10000 + ((c - 0xD800) << 10) + (nxt - 0xDC00)).encode("utf-8")
            i += 2
        else:
            out += b"\xef\xbf\xbd"
            i += 1
    return bytes(out), i


codecs.register_error("armlock-fffd", _surrogates_as_javascript)


def key_bytes(salt: str, unit_id: str) -> bytes:
    """UTF-8 bytes of ``salt + ":" + unit_id`` (byte-exact: no trimming, no case folding)."""
    return (salt + SEPARATOR + unit_id).encode("utf-8", "armlock-fffd")


def hash64(salt: str, unit_id: str) -> int:
    """XXH64 of the salted key with seed 42, as an unsigned 64-bit integer."""
    return xxhash.xxh64_intdigest(key_bytes(salt, unit_id), SEED)


def bucket_of_hash(h: int) -> int:
    """Multiply-shift on the top 32 bits: ``((h >> 32) * 10000) >> 32``."""
    return ((h >> 32) * BUCKETS) >> 32


def bucket(salt: str, unit_id: str) -> int:
    """The visitor's bucket in [0, 10000) for this salt.

    >>> bucket("demo-salt", "visitor-1") == bucket("demo-salt", "visitor-1")
    True
    """
    if not isinstance(salt, str) or not isinstance(unit_id, str):
        raise TypeError(
            f"bucket() takes str salt and str unit_id, got {type(salt).__name__} and "
            f"{type(unit_id).__name__}; convert ids to text first (ids are hashed byte-exact)"
        )
    return bucket_of_hash(hash64(salt, unit_id))


def cumulative(weights: Sequence[int]) -> list[int]:
    """Cumulative basis points: arm i covers buckets [cum[i-1], cum[i])."""
    out, total = [], 0
    for w in weights:
        total += w
        out.append(total)
    return out


def arm_index(bucket_value: int, cum: Sequence[int]) -> int:
    """Index of the first arm whose cumulative weight exceeds the bucket."""
    return bisect_right(cum, bucket_value)


def hash_thresholds(cum: Sequence[int]) -> list[int]:
    """Thresholds on the raw 64-bit hash equivalent to the bucket boundaries.

    bucket < c  <=>  (h >> 32) < ceil(c * 2^32 / 10000)  <=>  h < ceil(c * 2^32 / 10000) << 32,
    so the arm can be found from the hash without computing the bucket (batch fast path).
    """
    return [(-(-c * _SPAN // BUCKETS)) << 32 for c in cum]
