"""XXH64 and Spark xxhash64 against published values: the hash layer the contract rests on."""

from __future__ import annotations

import pytest
import xxhash

from armlock.assign.contract import SEED, bucket_of_hash, hash64

PRIME32 = 2654435761
PRIME64 = 11400714785074694797


def sanity_buffer(n: int) -> bytes:
    """The pseudorandom test buffer of xxHash's `XSUM_fillTestBuffer`.

    Source: Y. Collet, xxHash reference implementation, cli/xsum_sanity_check.c (GitHub
    Cyan4973/xxHash), as quoted in ../shared/REFERENCES.md section 1a.
    """
    out, gen = bytearray(), PRIME32
    for _ in range(n):
        out.append((gen >> 56) & 0xFF)
        gen = (gen * PRIME64) % (1 << 64)
    return bytes(out)


def test_sanity_buffer_prefix() -> None:
    # Same source: the first 14 bytes of the buffer.
    assert sanity_buffer(14).hex() == "0052929bb732a3242d00af950eec"


# Source: xxHash reference implementation, cli/xsum_sanity_check.c, table XSUM_XXH64_testdata[]
# (Y. Collet, GitHub Cyan4973/xxHash): (length, seed) -> XXH64.
@pytest.mark.parametrize(
    ("length", "seed", "expected"),
    [
        (0, 0, 0xEF46DB3751D8E999),
        (0, PRIME32, 0xAC75FDA2929B17EF),
        (1, 0, 0xE934A84ADB052768),
        (1, PRIME32, 0x5014607643A9B4C3),
        (4, 0, 0x9136A0DCA57457EE),
        (14, 0, 0x8282DCC4994E35C8),
        (14, PRIME32, 0xC3BD6BF63DEB6DF0),
        (222, 0, 0xB641AE8CB691C174),
        (222, PRIME32, 0x20CB8AB7AE10C14A),
    ],
)
def test_xxh64_reference_sanity_vectors(length: int, seed: int, expected: int) -> None:
    assert xxhash.xxh64_intdigest(sanity_buffer(length), seed) == expected


def test_xxh64_python_xxhash_readme_vectors() -> None:
    # Source: python-xxhash README (PyPI `xxhash`, GitHub ifduyue/python-xxhash), big-endian
    # canonical hex digests.
    assert xxhash.xxh64(b"xxhash").hexdigest() == "32dd38952c4bc720"
    assert xxhash.xxh64(b"xxhash", seed=20141025).intdigest() == 13067679811253438005


def _signed(u: int) -> int:
    return u - (1 << 64) if u >= 1 << 63 else u


def test_spark_documented_xxhash64_values() -> None:
    # Source: PySpark docs, pyspark.sql.functions.xxhash64 (seed 42): xxhash64('ABC') =
    # 4105715581806190027 and xxhash64('ABC','DEF') = 3233247871021311208 (columns chained: the
    # first hash is the seed of the second); Apache Spark hash.scala `XxHash64` example
    # xxhash64('Spark', array(123), 2) = 5602566077635097486 (ints hashed as 4 LE bytes).
    assert SEED == 42
    abc = xxhash.xxh64_intdigest(b"ABC", SEED)
    assert _signed(abc) == 4105715581806190027
    assert _signed(xxhash.xxh64_intdigest(b"DEF", abc)) == 3233247871021311208
    h = xxhash.xxh64_intdigest(b"Spark", SEED)
    h = xxhash.xxh64_intdigest((123).to_bytes(4, "little"), h)
    h = xxhash.xxh64_intdigest((2).to_bytes(4, "little"), h)
    assert _signed(h) == 5602566077635097486


def test_contract_key_is_salt_colon_id_utf8() -> None:
    # DESIGN.md contract: key = UTF-8(salt + ":" + id), XXH64 seed 42.
    assert hash64("s", "é") == xxhash.xxh64_intdigest("s:é".encode(), 42)


def test_bucket_multiply_shift_edges() -> None:
    assert bucket_of_hash(0) == 0
    assert bucket_of_hash((1 << 64) - 1) == 9999
    assert bucket_of_hash(1 << 63) == 5000
    assert bucket_of_hash((1 << 63) - 1) == 4999
