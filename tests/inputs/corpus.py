"""A generator of malformed inputs: each case is a file (name, bytes) and whether it can be judged at all.

Built at test time from a small good file, so the repository holds only this code. Cases cover
what real exports get wrong: empty or header-only files, byte-order marks, other delimiters,
broken quoting, damaged gzip bodies, not-Parquet and nested Parquet columns, duplicated columns,
numbers and times out of range, control characters, other encodings, ids that match nothing.
"""

from __future__ import annotations

import gzip
import io
import random
from collections.abc import Callable, Iterator
from dataclasses import dataclass

import pyarrow as pa
import pyarrow.parquet as pq


@dataclass(frozen=True)
class Case:
    """One malformed file: `judgeable` is False when nothing trustworthy can come of it (no PASS allowed)."""

    name: str
    filename: str
    data: bytes
    judgeable: bool = True


def _csv(header: list[str], rows: list[list[str]], sep: str = ",", eol: str = "\n") -> bytes:
    buf = io.StringIO()
    import csv

    w = csv.writer(buf, delimiter=sep, lineterminator=eol)
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue().encode("utf-8")


def _parquet(table: pa.Table) -> bytes:
    buf = io.BytesIO()
    pq.write_table(table, buf)
    return buf.getvalue()


def text_cases(stem: str, header: list[str], rows: list[list[str]], id_col: str, time_col: str | None,
               number_col: str | None = None) -> Iterator[Case]:
    """Malformed CSV / CSV.gz / Parquet versions of one good table (header + rows of text)."""
    good = _csv(header, rows)
    rnd = random.Random(12)
    i_id = header.index(id_col)
    yield Case("empty file", f"{stem}.csv", b"", judgeable=False)
    yield Case("header only", f"{stem}.csv", _csv(header, []), judgeable=False)
    yield Case("blank lines only", f"{stem}.csv", b"\n\n\n", judgeable=False)
    yield Case("bom only", f"{stem}.csv", b"\xef\xbb\xbf", judgeable=False)
    yield Case("bom then good", f"{stem}.csv", b"\xef\xbb\xbf" + good)
    yield Case("crlf line ends", f"{stem}.csv", _csv(header, rows, eol="\r\n"))
    yield Case("semicolons", f"{stem}.csv", _csv(header, rows, sep=";"), judgeable=False)
    yield Case("tabs", f"{stem}.csv", _csv(header, rows, sep="\t"), judgeable=False)
    yield Case("all ids empty", f"{stem}.csv", _csv(header, [[("" if j == i_id else c) for j, c in enumerate(r)]
                                                            for r in rows]), judgeable=False)
    yield Case("ids prefixed", f"{stem}.csv", _csv(header, [[("zz:" + c if j == i_id else c) for j, c in enumerate(r)]
                                                           for r in rows]), judgeable=False)
    yield Case("duplicate id column", f"{stem}.csv", _csv([*header, id_col], [[*r, r[i_id]] for r in rows]),
               judgeable=False)
    yield Case("ragged rows", f"{stem}.csv", good + b"only-one-field\n")
    yield Case("unbalanced quote", f"{stem}.csv", good + b'"never closed,1,2\n')
    yield Case("nul bytes", f"{stem}.csv", good.replace(b",", b"\x00,", 3))
    yield Case("latin-1", f"{stem}.csv", good + "caf\xe9,x\n".encode("latin-1"))
    yield Case("utf-16", f"{stem}.csv", good.decode("utf-8").encode("utf-16"))
    yield Case("random bytes", f"{stem}.csv", bytes(rnd.randrange(256) for _ in range(2000)))
    yield Case("control characters in ids", f"{stem}.csv",
               _csv(header, [[("\x1b[31m" + c + "\x07" if j == i_id else c) for j, c in enumerate(r)] for r in rows]))
    yield Case("html in ids", f"{stem}.csv",
               _csv(header, [[("<script>alert(1)</script>" + c if j == i_id else c) for j, c in enumerate(r)]
                             for r in rows]))
    yield Case("very long field", f"{stem}.csv", _csv(header, [*rows, [("x" * 200_000 if j == i_id else c)
                                                                      for j, c in enumerate(rows[0])]]))
    whole = gzip.compress(good)
    yield Case("gzip cut short", f"{stem}.csv.gz", whole[: len(whole) // 2])
    yield Case("gzip body damaged", f"{stem}.csv.gz", whole[:20] + bytes(b ^ 0x5A for b in whole[20:60]) + whole[60:])
    yield Case("gz name, plain text", f"{stem}.csv.gz", good)
    yield Case("csv name, gzip body", f"{stem}.csv", whole)
    yield Case("no extension", f"{stem}.txt", good)
    yield Case("parquet name, csv body", f"{stem}.parquet", good)
    table = pa.table({h: [r[j] for r in rows] for j, h in enumerate(header)})
    pq_bytes = _parquet(table)
    yield Case("parquet cut short", f"{stem}.parquet", pq_bytes[: len(pq_bytes) // 2])
    yield Case("parquet page damaged", f"{stem}.parquet",
               pq_bytes[:8] + bytes(b ^ 0xFF for b in pq_bytes[8:200]) + pq_bytes[200:])
    yield Case("parquet empty table", f"{stem}.parquet", _parquet(table.slice(0, 0)), judgeable=False)
    yield Case("parquet list id column", f"{stem}.parquet", _parquet(table.set_column(
        i_id, id_col, pa.array([[c] for c in table.column(id_col).to_pylist()]))), judgeable=False)
    yield Case("parquet struct id column", f"{stem}.parquet", _parquet(table.set_column(
        i_id, id_col, pa.array([{"v": c} for c in table.column(id_col).to_pylist()]))), judgeable=False)
    yield Case("parquet duplicate columns", f"{stem}.parquet", _parquet(pa.Table.from_arrays(
        [*table.columns, table.column(id_col)], names=[*header, id_col])), judgeable=False)
    yield Case("parquet binary ids", f"{stem}.parquet", _parquet(table.set_column(
        i_id, id_col, pa.array([c.encode() for c in table.column(id_col).to_pylist()], pa.binary()))))
    yield Case("parquet uint64 ids", f"{stem}.parquet", _parquet(table.set_column(
        i_id, id_col, pa.array([2**64 - 1 - k for k in range(len(rows))], pa.uint64()))), judgeable=False)
    if time_col is not None:
        i_t = header.index(time_col)

        def times(f: Callable[[str], str], name: str, judge: bool = True) -> Case:
            return Case(name, f"{stem}.csv", _csv(header, [[(f(c) if j == i_t else c) for j, c in enumerate(r)]
                                                          for r in rows]), judgeable=judge)

        yield times(lambda c: "1767600000", "epoch seconds")
        yield times(lambda c: "1767600000123", "epoch milliseconds")
        yield times(lambda c: "05/01/2026 10:00", "day/month/year")
        yield times(lambda c: "9999-12-31T23:59:59Z", "year 9999")
        yield times(lambda c: "0001-01-01T00:00:00Z", "year 1")
        yield times(lambda c: "", "all times empty", judge=False)
        yield times(lambda c: "2026-02-30T10:00:00Z", "impossible date")
        yield Case("parquet times as int64", f"{stem}.parquet", _parquet(table.set_column(
            i_t, time_col, pa.array([1767600000] * len(rows), pa.int64()))))
        yield Case("parquet far timestamps", f"{stem}.parquet", _parquet(table.set_column(
            i_t, time_col, pa.array([253402300799000000] * len(rows), pa.timestamp("us", "UTC")))))
    if number_col is not None:
        i_n = header.index(number_col)
        for val, name in (("1" + "0" * 30, "integer beyond int64"), ("inf", "infinity"), ("nan", "not a number"),
                          ("1,5", "decimal comma")):
            yield Case(name, f"{stem}.csv", _csv(header, [[(val if j == i_n else c) for j, c in enumerate(r)]
                                                         for r in rows]))
        yield Case("parquet uint64 beyond int64", f"{stem}.parquet", _parquet(table.set_column(
            i_n, number_col, pa.array([2**64 - 1] * len(rows), pa.uint64()))))


SPEC_CASES: list[tuple[str, bytes]] = [
    ("empty", b""),
    ("bom only", b"\xef\xbb\xbf"),
    ("not toml", b"this is not toml = = ="),
    ("deeply nested arrays", b"x = " + b"[" * 50_000 + b"]" * 50_000),
    ("deeply nested tables", b"x = " + b"{a = " * 5_000 + b"1" + b"}" * 5_000),
    ("latin-1", "name = \"caf\xe9\"".encode("latin-1")),
    ("start year 1", None),  # type: ignore[list-item]  (filled from the good spec)
    ("start year 9999", None),  # type: ignore[list-item]
    ("start far offset", None),  # type: ignore[list-item]
    ("weights not summing", None),  # type: ignore[list-item]
    ("huge weight", None),  # type: ignore[list-item]
    ("arms as a string", None),  # type: ignore[list-item]
    ("unknown key", None),  # type: ignore[list-item]
    ("control characters in name", None),  # type: ignore[list-item]
    ("delimiter of two characters", None),  # type: ignore[list-item]
    ("unknown time format", None),  # type: ignore[list-item]
]


def spec_cases(good: str) -> Iterator[tuple[str, bytes]]:
    """Broken spec files, most of them one edit away from `good`."""
    edits: dict[str, Callable[[str], str]] = {
        "start year 1": lambda s: s.replace("start = 2026-01-05T00:00:00Z", "start = 0001-01-01T00:00:00Z"),
        "start year 9999": lambda s: s.replace("start = 2026-01-05T00:00:00Z", "start = 9999-12-31T23:59:59Z"),
        "start far offset": lambda s: s.replace("start = 2026-01-05T00:00:00Z", "start = 9999-12-31T23:59:59-23:59"),
        "weights not summing": lambda s: s.replace("weight = 2000", "weight = 2001"),
        "huge weight": lambda s: s.replace("weight = 2000", "weight = 99999999999999999999"),
        "arms as a string": lambda s: s.split("[[arms]]")[0] + 'arms = "holdout"\n',
        "unknown key": lambda s: s + "\n[audit.visits]\nvisitor = \"x\"\n",
        "control characters in name": lambda s: s.replace('name = "mistakes"', 'name = "mis\\u001btakes"'),
        "delimiter of two characters": lambda s: s + '\n[audit.visits]\ndelimiter = ";;"\n',
        "unknown time format": lambda s: s + '\n[audit.exposures]\ntime_format = "dd/mm/yyyy"\n',
    }
    for name, data in SPEC_CASES:
        yield name, (data if data is not None else edits[name](good).encode("utf-8"))
