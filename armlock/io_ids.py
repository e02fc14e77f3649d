"""Streaming reader of unit ids (lines, a CSV column or a Parquet column) and writer of arms."""

from __future__ import annotations

import csv
import gzip
import io
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import IO

from armlock.assign import InputError

CHUNK = 200_000
csv.field_size_limit(16 * 1024 * 1024)


def _is_parquet(name: str) -> bool:
    return name.lower().endswith((".parquet", ".pq"))


def _open_text(path: str) -> tuple[IO[str], IO[bytes] | None, int | None]:
    """Open a file (or '-' for stdin) as UTF-8 text; returns (text, raw for progress, size)."""
    if path == "-":
        return io.TextIOWrapper(sys.stdin.buffer, encoding="utf-8", newline=""), None, None
    p = Path(path)
    try:
        raw: IO[bytes] = open(p, "rb")  # noqa: SIM115
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a file of ids") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open: {exc.strerror}") from None
    size = p.stat().st_size
    stream: IO[bytes] = gzip.GzipFile(fileobj=raw) if path.lower().endswith(".gz") else raw
    return io.TextIOWrapper(stream, encoding="utf-8", newline=""), raw, size


def read_ids(
    path: str, column: str | None, advance: Callable[[int], None] = lambda n: None
) -> Iterator[list[str | None]]:
    """Yield chunks of ids. Lines: one id per line ('\\r\\n' or '\\n' endings are not part of it);
    CSV with a header when `column` is given; Parquet by extension (`column` required)."""
    if _is_parquet(path):
        yield from _read_parquet(path, column, advance)
        return
    text, raw, _ = _open_text(path)
    pos = 0
    try:
        if column is None:
            chunk: list[str | None] = []
            lineno = 0
            for lineno, line in enumerate(text, 1):  # noqa: B007
                if line.endswith("\n"):
                    line = line[:-1]
                if line.endswith("\r"):
                    line = line[:-1]
                chunk.append(line)
                if len(chunk) >= CHUNK:
                    yield chunk
                    chunk = []
                    if raw is not None:
                        advance(raw.tell() - pos)
                        pos = raw.tell()
            if chunk:
                yield chunk
        else:
            reader = csv.reader(text)
            try:
                header = next(reader)
            except StopIteration:
                raise InputError(f"{path}: the file is empty; expected a header row with column '{column}'") from None
            if column not in header:
                shown = ", ".join(repr(h) for h in header[:30])
                raise InputError(f"{path}: no column '{column}'; the columns are: {shown}")
            idx = header.index(column)
            chunk = []
            for row in reader:
                if len(row) <= idx:
                    if not row:  # a blank line in a CSV is not a row
                        continue
                    raise InputError(
                        f"{path}: row {reader.line_num - 1} (line {reader.line_num}) has "
                        f"{len(row)} fields, no value for column '{column}'"
                    )
                chunk.append(row[idx])
                if len(chunk) >= CHUNK:
                    yield chunk
                    chunk = []
                    if raw is not None:
                        advance(raw.tell() - pos)
                        pos = raw.tell()
            if chunk:
                yield chunk
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text (bad byte 0x{exc.object[exc.start]:02x}); "
                         "re-export the ids as UTF-8") from None
    except csv.Error as exc:
        raise InputError(f"{path}: malformed CSV near line {reader.line_num}: {exc}") from None  # type: ignore[possibly-undefined]
    except (OSError, EOFError) as exc:
        raise InputError(f"{path}: cannot read: {exc}") from None
    finally:
        if raw is not None:
            advance(max(0, (raw.tell() if not raw.closed else pos) - pos))
            text.close()


def _read_parquet(path: str, column: str | None, advance: Callable[[int], None]) -> Iterator[list[str | None]]:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(path)
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except (OSError, pa.ArrowException) as exc:
        raise InputError(f"{path}: not a readable Parquet file: {exc}") from None
    names = pf.schema_arrow.names
    if column is None:
        if len(names) != 1:
            raise InputError(f"{path}: say which column holds the ids with --column; the columns are: {', '.join(names)}")
        column = names[0]
    if column not in names:
        raise InputError(f"{path}: no column '{column}'; the columns are: {', '.join(names)}")
    typ = pf.schema_arrow.field(column).type
    if not (pa.types.is_string(typ) or pa.types.is_large_string(typ) or pa.types.is_integer(typ)):
        raise InputError(f"{path}: column '{column}' is {typ}; ids must be text (or integers)")
    per_row = max(1, Path(path).stat().st_size // max(1, pf.metadata.num_rows))
    for batch in pf.iter_batches(batch_size=CHUNK, columns=[column]):
        col = batch.column(0)
        if not pa.types.is_string(col.type):
            col = pc.cast(col, pa.string())
        advance(per_row * len(col))
        yield col.to_pylist()


class ArmWriter:
    """Writes `unit_id,bucket,arm` rows as CSV (RFC 4180 quoting) or Parquet."""

    def __init__(self, out: str | None) -> None:
        self.out = out
        self._pq = None
        if out and _is_parquet(out):
            self._fh = None
            parent = Path(out).parent
            if not parent.is_dir():
                raise InputError(f"{out}: cannot write: folder {parent} does not exist")
        else:
            try:
                self._fh = open(out, "w", encoding="utf-8", newline="") if out else None  # noqa: SIM115
            except OSError as exc:
                raise InputError(f"{out}: cannot write: {exc.strerror}") from None
            stream = self._fh or io.TextIOWrapper(sys.stdout.buffer, encoding="utf-8", newline="", write_through=True)
            self._stream = stream
            self._csv = csv.writer(stream, lineterminator="\n")
            self._csv.writerow(["unit_id", "bucket", "arm"])

    def write(self, ids: list[str | None], buckets: list[int | None], arms: list[str | None]) -> None:
        if self.out and _is_parquet(self.out):
            import pyarrow as pa
            import pyarrow.parquet as pq

            table = pa.table({"unit_id": pa.array(ids, pa.string()), "bucket": pa.array(buckets, pa.int16()),
                              "arm": pa.array(arms, pa.string())})
            if self._pq is None:
                try:
                    self._pq = pq.ParquetWriter(self.out, table.schema)
                except OSError as exc:
                    raise InputError(f"{self.out}: cannot write: {exc}") from None
            self._pq.write_table(table)
        else:
            self._csv.writerows(zip(["" if i is None else i for i in ids],
                                    ["" if b is None else b for b in buckets],
                                    ["" if a is None else a for a in arms]))

    def close(self) -> None:
        if self._pq is not None:
            self._pq.close()
        elif self.out and _is_parquet(self.out):  # no rows at all: still write a valid, empty file
            import pyarrow as pa
            import pyarrow.parquet as pq

            try:
                pq.write_table(pa.table({"unit_id": pa.array([], pa.string()), "bucket": pa.array([], pa.int16()),
                                         "arm": pa.array([], pa.string())}), self.out)
            except OSError as exc:
                raise InputError(f"{self.out}: cannot write: {exc}") from None
        elif self._fh is not None:
            self._fh.close()
        else:
            self._stream.flush()
            self._stream.detach()
