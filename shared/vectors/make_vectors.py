"""Regenerates the frozen assignment vectors. Run only to ADD layouts or ids, never to change rows.

    python shared/vectors/make_vectors.py --write

The test suite fails if any existing row's bucket or arm changes: that would be a new contract.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path


from armlock.assign.contract import BUCKETS, bucket, hash64

HERE = Path(__file__).parent
OUT = HERE / "assignment_vectors.json"

LAYOUTS = [
    ("even-50-50", "v1-even", [["holdout", 5000], ["exposed", 5000]]),
    ("holdout-10", "c0ffee1234abcd5678ef9012", [["holdout", 1000], ["exposed", 9000]]),
    ("exposed-first-90-10", "alt-salt", [["exposed", 9000], ["holdout", 1000]]),
    ("three-arms", "3arm-salt", [["holdout", 2000], ["exposed_low", 4000], ["exposed_high", 4000]]),
    ("odd-weights", "odd", [["holdout", 3333], ["exposed_a", 3333], ["exposed_b", 3334]]),
    ("unicode-salt", "sål✓-𝔰", [["holdout", 5000], ["exposed", 5000]]),
]

IDS = [
    "visitor-1", "visitor-2", "visitor-3", "0", "1", "42", "A", "a", " a ", "a ", " a",
    "NULL", "null", "NA", "None", "nan", "true",
    "2f1b6c2e-8a0e-4d7e-9a3c-5b1d2e3f4a5b", "6F9619FF-8B86-D011-B42D-00C04FC964FF",
    "GA1.2.1234567890.1700000000", "cust_000123", "user@mail.example",
    "café", "cafe\u0301", "日本語のID", "Ελληνικά", "עברית", "مرحبا", "😀", "👩‍👩‍👧‍👦", "𝔘𝔫𝔦", "\U0010ffff",
    "\ud800", "a\udc00b", "\ufffd", "\ufeffbom",
    "", "\x00", "tab\there", "line\nbreak", "crlf\r\nend", "\r", "back\\slash",
    'quote"inside', "'single'", '"', "comma,inside", 'a,"b",c', "semi;colon", "<script>alert(1)</script>",
    "x" * 31, "x" * 32, "x" * 33, "y" * 63, "y" * 64, "z" * 100, "é" * 50, "long-" * 2000,
]


def build() -> dict:
    layouts = []
    for name, salt, arms in LAYOUTS:
        cum, total = [], 0
        for _, w in arms:
            total += w
            cum.append(total)
        assert total == BUCKETS
        cases = []
        for uid in IDS:
            if uid == "":
                cases.append({"id": uid, "hash": None, "bucket": None, "arm": None})
                continue
            b = bucket(salt, uid)
            arm = next(a for (a, _), c in zip(arms, cum) if c > b)
            cases.append({"id": uid, "hash": f"{hash64(salt, uid):016x}", "bucket": b, "arm": arm})
        layouts.append({"name": name, "salt": salt, "arms": arms, "cases": cases})
    return {
        "contract": "armlock-assign-1",
        "about": (
            "Frozen assignment vectors: key = UTF-8(salt + ':' + id) (a lone surrogate encodes as "
            "U+FFFD), hash = XXH64(key, seed 42) as 16 hex digits, bucket = ((hash >> 32) * 10000) "
            ">> 32, arm = first arm whose cumulative weight exceeds the bucket; an empty id gets no "
            "arm. Every runtime (Python, browser snippet, Node, Spark SQL) is tested against this file."
        ),
        "layouts": layouts,
    }


if __name__ == "__main__":
    data = build()
    text = json.dumps(data, indent=1, ensure_ascii=True) + "\n"
    if "--write" in sys.argv:
        OUT.write_text(text, encoding="ascii")
        print(f"wrote {OUT.name}: {sum(len(l['cases']) for l in data['layouts'])} cases")
    else:
        print(text[:2000])
