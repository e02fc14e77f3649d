"""Integer keys for text ids (the pandas engine): each id's row in the visits, and rows that repeat exactly.

Hashing an id string is the costly step of a pass over tens of millions of exposure rows, so it
happens once: every exposure id is looked up in the visits' ids (Arrow's `index_in`, a hash set
built over the visits), and from then on a row's unit is an integer. Exact duplicate rows are
found on integer keys too (`duplicate_rows`), by sorting one 64-bit mix of the keys (numpy's sort
of 64-bit integers is vectorized) and confirming the few rows whose mixes collide exactly.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

# Odd 64-bit multipliers (the golden-ratio constant and the two of splitmix64's finalizer): any odd
# constants do; they only spread the keys so that different rows rarely share a mix.
_MULTIPLIERS = (0x9E3779B97F4A7C15, 0xBF58476D1CE4E5B9, 0x94D049BB133111EB)


def arrow_ids(s: pd.Series) -> pa.ChunkedArray:
    """A text column as Arrow (no copy when pandas already holds it in Arrow)."""
    if hasattr(s.array, "__arrow_array__"):
        return pa.chunked_array(s.array.__arrow_array__())
    return pa.chunked_array([pa.array(s.array)])


def ns_of(times: pd.Series) -> np.ndarray:
    """Nanoseconds since 1970 of a UTC time column, as int64 (a view when it is already in nanoseconds)."""
    arr = times.array
    if getattr(arr, "unit", "ns") != "ns":
        arr = arr.as_unit("ns")
    return np.asarray(arr.asi8)


def positions(ids: pd.Series | pa.ChunkedArray | pa.Array, value_set: pa.Array, distinct: bool = False) -> np.ndarray:
    """Row of each id in `value_set` (the visits' unit ids), -1 when the id is not there.

    Arrow's lookup builds a hash set of its value set and probes it once per id; building costs
    more than probing, so the set is built over the smaller side. With at most half as many ids as
    the value set holds (the identity links against the units), the value set is looked up in the
    distinct ids (`distinct_codes` numbers them first, unless `distinct` says they already are).
    Above a million ids, and several times as many ids as the value set holds, the lookup runs in
    slices on threads (Arrow releases the GIL); each slice builds its own hash set of `value_set`,
    so with fewer ids (the orders against the units) one lookup is faster.
    """
    arr = ids if isinstance(ids, (pa.ChunkedArray, pa.Array)) else arrow_ids(ids)
    n = len(arr)
    if 0 < 2 * n <= len(value_set):
        if distinct:
            return _first_rows(arr, value_set)
        codes, uniq = distinct_codes(arr)
        return _first_rows(uniq, value_set)[codes]
    parts = max(1, min(os.cpu_count() or 1, 8)) if n > max(1_000_000, 4 * len(value_set)) else 1
    edges = np.linspace(0, n, parts + 1).astype(np.int64)

    def one(i: int) -> np.ndarray:
        piece = arr.slice(int(edges[i]), int(edges[i + 1] - edges[i]))
        return pc.fill_null(pc.index_in(piece, value_set=value_set), -1).to_numpy().astype(np.int64)

    if parts == 1:
        return one(0)
    with ThreadPoolExecutor(max_workers=parts) as pool:
        return np.concatenate(list(pool.map(one, range(parts))))


def distinct_codes(ids: pd.Series | pa.ChunkedArray | pa.Array) -> tuple[np.ndarray, pa.Array]:
    """(code of each id, the distinct ids): codes number the distinct ids in order of first appearance."""
    arr = ids if isinstance(ids, (pa.ChunkedArray, pa.Array)) else arrow_ids(ids)
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    enc = pc.dictionary_encode(arr, null_encoding="encode")  # a null is an id of its own, as index_in has it
    return enc.indices.to_numpy(zero_copy_only=False).astype(np.intp), enc.dictionary


def _first_rows(uniq: pa.ChunkedArray | pa.Array, value_set: pa.Array) -> np.ndarray:
    """`positions` of distinct ids by a hash set of them: each value-set row finds its id, and each
    id takes the first value-set row that found it (as Arrow's `index_in` returns the first)."""
    hit = pc.index_in(value_set, value_set=uniq)  # per value-set row: the number of its id, or null
    rows = np.flatnonzero(hit.is_valid().to_numpy(zero_copy_only=False))
    first = np.full(len(uniq), len(value_set), dtype=np.int64)
    np.minimum.at(first, hit.drop_null().to_numpy().astype(np.intp), rows)
    first[first == len(value_set)] = -1
    return first


def repeated_rows(*columns: pd.Series) -> np.ndarray:
    """True for each row whose ids in every column equal those of an earlier row (pandas' `duplicated`,
    keep="first"): the units seen again in the visits, the identity links given twice.

    A column whose ids all have the same number of bytes (hex or UUID cookies, the usual case) is
    its bytes as 64-bit words (`_same_length_words`); another is numbered by Arrow's dictionary
    encoding (`distinct_codes`). `duplicate_rows` then compares the integer rows: a sort of one
    mix per row, which costs half of a hash set of millions of strings. A single column without
    one length needs no sort: its numbers count the distinct ids in order of first appearance, so
    a row is a first appearance exactly when its number exceeds every number before it.
    """
    keys: list[np.ndarray] = []
    for col in columns:
        arr = arrow_ids(col)
        words = _same_length_words(arr)
        if words is not None:
            keys += [words[:, j] for j in range(words.shape[1])]
        elif len(columns) > 1:
            keys.append(distinct_codes(arr)[0])
        else:
            codes = distinct_codes(arr)[0].astype(np.int64)
            before = np.maximum.accumulate(np.concatenate([[-1], codes[:-1]]))
            return codes <= before
    return duplicate_rows(*keys)


_WORDS_MAX = 8  # ids of up to 64 bytes are compared as words; longer ones are rare and hashed


def _same_length_words(arr: pa.ChunkedArray) -> np.ndarray | None:
    """Each id's bytes as a row of 64-bit words (zero-padded), when all ids are text without nulls of
    one common length of 1 to 64 bytes; else None. Equal rows are then exactly equal ids."""
    if not len(arr) or arr.null_count or not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
        return None
    one = arr.combine_chunks()
    width = np.int64 if pa.types.is_large_string(one.type) else np.int32
    off = np.frombuffer(one.buffers()[1], dtype=width)[one.offset:one.offset + len(one) + 1]
    size = int(off[1] - off[0])
    if not 0 < size <= 8 * _WORDS_MAX or int(off[-1] - off[0]) != size * len(one) or (np.diff(off) != size).any():
        return None
    raw = np.frombuffer(one.buffers()[2], dtype=np.uint8)[int(off[0]):int(off[-1])].reshape(len(one), size)
    padded = np.zeros((len(one), 8 * ((size + 7) // 8)), dtype=np.uint8)
    padded[:, :size] = raw
    return padded.view(np.uint64)


def unit_codes(ids: pd.Series, pos: np.ndarray, n_visits: int) -> np.ndarray:
    """An integer per id, equal exactly when the ids are equal: its visits row, else n_visits + a code
    among the ids that are not in the visits."""
    codes = pos.copy()
    unseen = np.flatnonzero(pos < 0)
    if len(unseen):
        enc = pc.dictionary_encode(arrow_ids(ids).take(pa.array(unseen))).combine_chunks()
        codes[unseen] = n_visits + enc.indices.to_numpy(zero_copy_only=False).astype(np.int64)
    return codes


def duplicate_rows(*keys: np.ndarray) -> np.ndarray:
    """True for each row whose integer keys all equal those of an earlier row (the first copy is False).

    When the first key never decreases (a log sorted by time, the usual export), a row can only
    repeat one that shares its first key and sits next to it, so only such runs are examined.
    The rows left to examine are mixed into one 64-bit number each and sorted; equal rows have
    equal mixes, and the rows whose mix occurs more than once (few, unless the data really
    repeats) are compared key by key (pandas' `duplicated`), so a collision of mixes between
    different rows never marks one of them.
    """
    n = len(keys[0])
    out = np.zeros(n, dtype=bool)
    if n < 2:
        return out
    first = keys[0]
    if bool((first[1:] >= first[:-1]).all()):
        tie = first[1:] == first[:-1]
        if not tie.any():
            return out
        rows = np.flatnonzero(np.concatenate([tie, [False]]) | np.concatenate([[False], tie]))
        if len(rows) < n:
            out[rows[duplicate_rows(*(np.asarray(k)[rows] for k in keys[1:]), first[rows])]] = True
            return out
    mix = np.zeros(n, dtype=np.uint64)
    term = np.empty(n, dtype=np.uint64)
    for i, k in enumerate(keys):
        np.copyto(term, k, casting="unsafe")  # integers wrap modulo 2**64: a mix, not a number
        term *= np.uint64(_MULTIPLIERS[i % len(_MULTIPLIERS)] + 2 * (i // len(_MULTIPLIERS)))
        mix ^= term
    del term
    mix ^= mix >> np.uint64(31)  # fold the high bits into the low ones
    ordered = np.sort(mix)
    same = ordered[1:] == ordered[:-1]
    if not same.any():
        return out
    repeated = np.unique(ordered[1:][same])
    del ordered, same
    cand = np.flatnonzero(np.isin(mix, repeated))
    sub = pd.DataFrame({str(i): k[cand] for i, k in enumerate(keys)})
    out[cand[sub.duplicated().to_numpy()]] = True
    return out
