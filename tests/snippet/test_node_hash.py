"""The snippet's hash, bucket and arm in Node, against the xxHash reference and Python."""

from __future__ import annotations

import json
import subprocess

import pytest
import xxhash

from armlock.assign.batch import arm_for
from armlock.assign.contract import SEED, bucket, key_bytes
from armlock.assign.snippet import TEMPLATE, _template, render_snippet

from .helpers import VECTORS, make_spec, need, random_ids, run_node

# Collet, xxHash reference implementation, cli/xsum_sanity_check.c, XSUM_XXH64_testdata[]:
# (length of the XSUM_fillTestBuffer buffer, seed, XXH64). Copied from shared REFERENCES.md 1a,
# which reproduced all of them with python-xxhash.
XXH64_SANITY = [
    (0, 0, 0xEF46DB3751D8E999),
    (0, 2654435761, 0xAC75FDA2929B17EF),
    (1, 0, 0xE934A84ADB052768),
    (1, 2654435761, 0x5014607643A9B4C3),
    (4, 0, 0x9136A0DCA57457EE),
    (14, 0, 0x8282DCC4994E35C8),
    (14, 2654435761, 0xC3BD6BF63DEB6DF0),
    (222, 0, 0xB641AE8CB691C174),
    (222, 2654435761, 0x20CB8AB7AE10C14A),
]


def sanity_buffer(n: int) -> list[int]:
    """XSUM_fillTestBuffer of xsum_sanity_check.c: byte = top byte of a PRIME64 power sequence."""
    gen, out = 2654435761, []
    for _ in range(n):
        out.append((gen >> 56) & 0xFF)
        gen = (gen * 11400714785074694797) % (1 << 64)
    return out


def run_template_hash(cases: list[tuple[list[int], int]]) -> list[str]:
    """Run the template's own hash code (between its @hash markers) with a chosen seed."""
    src = _template(TEMPLATE)
    body = src.split("// @hash-begin", 1)[1].split("\n", 1)[1].split("// @hash-end", 1)[0]
    script = (
        "const vm = require('vm'); let inp = '';"
        "process.stdin.on('data', c => inp += c); process.stdin.on('end', () => {"
        " const req = JSON.parse(inp); const ctx = vm.createContext({});"
        " vm.runInContext(req.body, ctx);"
        " const out = req.cases.map(([bytes, seed]) => {"
        "  ctx.SEED = [seed & 65535, (seed >>> 16) & 65535, 0, 0]; ctx.BYTES = bytes;"
        "  const h = vm.runInContext('xxh64(BYTES)', ctx);"
        "  return h.slice().reverse().map(x => x.toString(16).padStart(4, '0')).join(''); });"
        " process.stdout.write(JSON.stringify(out)); });"
    )
    # `var SEED = [42, 0, 0, 0]` is a global of the context, so each case can set its own seed.
    proc = subprocess.run([need("node"), "-e", script],
                          input=json.dumps({"body": body, "cases": cases}),
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def test_template_hash_matches_xxhash_reference_sanity_vectors() -> None:
    # Source: Collet, xxHash, cli/xsum_sanity_check.c (XSUM_XXH64_testdata), see XXH64_SANITY.
    got = run_template_hash([(sanity_buffer(n), seed) for n, seed, _ in XXH64_SANITY])
    assert got == [f"{h:016x}" for _, _, h in XXH64_SANITY]


def test_template_hash_matches_python_xxhash_on_all_lengths() -> None:
    # Reference: python-xxhash (bundles Collet's reference xxHash C code); every length 0..300
    # covers the <32-byte path, the 4-lane stripes and every 8/4/1-byte tail combination.
    buf = sanity_buffer(300)
    cases = [(buf[:n], seed) for n in range(301) for seed in (42, 0)]
    want = [f"{xxhash.xxh64_intdigest(bytes(b), seed):016x}" for b, seed in cases]
    assert run_template_hash(cases) == want


def test_template_seed_is_the_contract_seed() -> None:
    # shared/CONTRACT.md: seed 42, the seed of Apache Spark's xxhash64 (Spark hash.scala, XxHash64).
    assert SEED == 42 and "SEED = [42, 0, 0, 0]" in _template(TEMPLATE)


def _vector_layouts() -> list[dict]:
    return json.loads(VECTORS.read_text(encoding="utf-8"))["layouts"]


@pytest.mark.parametrize("layout", _vector_layouts(), ids=lambda lay: lay["name"])
def test_rendered_snippet_matches_the_frozen_vectors(layout: dict) -> None:
    arms = [(n, w, "holdout" if n.startswith("holdout") else "exposed") for n, w in layout["arms"]]
    spec = make_spec(salt=layout["salt"], arms=arms)
    ids = [c["id"] for c in layout["cases"]]
    res = run_node({"snippet": render_snippet(spec, "js"), "ids": ids})
    assert res["pageError"] is None
    for case, b, a in zip(layout["cases"], res["buckets"], res["arms"]):
        assert (b, a) == (case["bucket"], case["arm"]), repr(case["id"])


def test_rendered_snippet_matches_python_on_20000_random_ids() -> None:
    # Reference: python-xxhash via assign.contract.bucket and assign.batch.arm_for.
    spec = make_spec(salt="s\u00e5lt-\U0001d530",
                     arms=[("holdout", 2000, "holdout"), ("exposed_a", 4000, "exposed"),
                           ("exposed_b", 4000, "exposed")])
    ids = random_ids(20_000, seed=20261201)
    assert sum(len(key_bytes(spec.salt, i)) >= 32 for i in ids) > 5000  # stripe path exercised
    assert sum(any(0xD800 <= ord(c) <= 0xDFFF for c in i) for i in ids) > 1000  # lone surrogates
    assert sum(any(ord(c) > 0xFFFF for c in i) for i in ids) > 1000  # astral characters
    res = run_node({"snippet": render_snippet(spec, "js"), "ids": ids})
    want_b = [bucket(spec.salt, i) if i else None for i in ids]
    want_a = [arm_for(spec, i) for i in ids]
    bad = [(i, b, wb) for i, b, wb in zip(ids, res["buckets"], want_b) if b != wb]
    assert not bad, f"{len(bad)} of {len(ids)} buckets differ, first {bad[:3]!r}"
    assert res["arms"] == want_a
    # the three arms all occur, so the cumulative-weight walk is exercised
    assert set(res["arms"]) == {None, "holdout", "exposed_a", "exposed_b"}
