"""Streaming reader of unit ids (lines, a CSV column or a Parquet column) and writer of arms."""

from __future__ import annotations

import csv
import gzip
import io
import os
import sys
import zlib
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import IO, Any

from armlock.assign import InputError

from .files import in_place, os_error_text, remove_stale_temps, temp_path

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
    stream: IO[bytes] | gzip.GzipFile = gzip.GzipFile(fileobj=raw) if path.lower().endswith(".gz") else raw
    return io.TextIOWrapper(stream, encoding="utf-8", newline=""), raw, size


BOM = "\ufeff"
NOTE_BOM = "a leading UTF-8 byte-order mark was removed (it is not part of any id)"
_READ_ERRORS = (OSError, EOFError, zlib.error)


def _is_csv(name: str) -> bool:
    return name.lower().endswith((".csv", ".csv.gz"))


HEADER_NAMES = {"unit_id", "id", "ids", "visitor_id", "user_id", "uid", "cookie_id", "client_id", "unit"}


def _lines(text: IO[str]) -> Iterator[str]:
    """Lines ended by \\n only (a lone \\r is not a line end: `read_ids` refuses it rather than split an id)."""
    buf = ""
    while True:
        block = text.read(1 << 16)
        if not block:
            break
        buf += block
        *done, buf = buf.split("\n")
        for line in done:
            yield line + "\n"
    if buf:
        yield buf


def _one_id_per_line(path: str, lines: list[str | None]) -> None:
    """Refuse a header line or CSV rows read as ids (one id per line has neither)."""
    name = "stdin" if path == "-" else path
    head = (lines[0] or "").strip().lower()
    if head in HEADER_NAMES:
        raise InputError(f"{name}: line 1 is '{lines[0]}', a column name, not an id: pass --column {lines[0]} to "
                         "read the file as CSV with a header, or remove that line")
    for sep, word in ((",", "commas"), ("\t", "tabs"), (";", "semicolons")):
        filled = [x for x in lines if x]
        counts = {x.count(sep) for x in filled}
        if len(filled) >= 2 and len(counts) == 1 and counts != {0}:
            raise InputError(f"{name}: every line holds {counts.pop() + 1} fields separated by {word}: this is a "
                             "table, not one id per line; pass --column NAME (the id column of its header)")


def read_ids(
    path: str, column: str | None, advance: Callable[[int], None] = lambda n: None,
    note: Callable[[str], None] = lambda text: None,
) -> Iterator[list[str | None]]:
    """Yield chunks of ids.

    - `.parquet`/`.pq`: the `column` (optional when the file has one column);
    - `.csv`/`.csv.gz`: CSV with a header; `column` names the id column (optional when there is
      only one column, which is then said through `note`);
    - anything else, and stdin: one id per line ('\\r\\n' or '\\n' endings are not part of it),
      or CSV with a header when `column` is given.
    A leading UTF-8 byte-order mark is never part of an id or a column name: it is removed and noted.
    """
    if _is_parquet(path):
        yield from _read_parquet(path, column, advance, note)
        return
    as_csv = column is not None or _is_csv(path)
    text, raw, _ = _open_text(path)
    pos = 0
    reader = None
    try:
        if not as_csv:
            chunk: list[str | None] = []
            first = True
            for lineno, line in enumerate(_lines(text), 1):
                if lineno == 1 and line.startswith(BOM):
                    line = line[1:]
                    note(f"{path}: {NOTE_BOM}")
                if line.endswith("\n"):
                    line = line[:-1]
                if line.endswith("\r"):
                    line = line[:-1]
                if "\r" in line:
                    raise InputError(f"{'stdin' if path == '-' else path}: line {lineno} holds a carriage return inside it (lines ended by CR "
                                     "alone, an old export format?): re-export the ids one per line with \\n or "
                                     "\\r\\n line ends")
                chunk.append(line)
                if len(chunk) >= CHUNK or (first and len(chunk) >= 50):
                    if first:
                        _one_id_per_line(path, chunk)
                        first = False
                    yield chunk
                    chunk = []
                    if raw is not None:
                        advance(raw.tell() - pos)
                        pos = raw.tell()
            if chunk:
                if first:
                    _one_id_per_line(path, chunk)
                yield chunk
        else:
            reader = csv.reader(text)
            try:
                header = next(reader)
            except StopIteration:
                want = f"with column '{column}'" if column else "naming the id column"
                raise InputError(f"{path}: the file is empty; expected a header row {want}") from None
            if header and header[0].startswith(BOM):
                header[0] = header[0][1:]
                note(f"{path}: {NOTE_BOM}")
            shown = ", ".join(repr(h) for h in header[:30]) + (f" (and {len(header) - 30} more)" if len(header) > 30 else "")
            if column is None:
                if len(header) != 1:
                    raise InputError(f"{path}: a CSV file with {len(header)} columns; say which one holds the ids "
                                     f"with --column; the columns are: {shown}")
                column = header[0]
                note(f"{path}: read as CSV with a header; ids from its one column '{column}'")
            where = [i for i, h in enumerate(header) if h == column]
            if not where:
                hint = ""
                if len(header) == 1 and any(sep in header[0] for sep in ";\t|"):
                    hint = " (the header looks separated by ';', tab or '|', not ','; re-export it with commas)"
                raise InputError(f"{path}: no column '{column}'; the columns are: {shown}{hint}")
            if len(where) > 1:
                raise InputError(f"{path}: column '{column}' appears {len(where)} times in the header (columns "
                                 f"{', '.join(str(i + 1) for i in where)}); which one holds the ids is ambiguous")
            idx = where[0]
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
        near: int | str = reader.line_num if reader is not None else "?"
        raise InputError(f"{path}: malformed CSV near line {near}: {exc}") from None
    except _READ_ERRORS as exc:
        gz = isinstance(exc, (zlib.error, EOFError, gzip.BadGzipFile))
        why = f"the gzip data is damaged or cut short ({exc})" if gz else str(exc)
        raise InputError(f"{path}: cannot read: {why}") from None
    finally:
        if raw is not None:
            advance(max(0, (raw.tell() if not raw.closed else pos) - pos))
            text.close()


def _read_parquet(path: str, column: str | None, advance: Callable[[int], None],
                  note: Callable[[str], None] = lambda text: None) -> Iterator[list[str | None]]:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(path)
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a directory, not a file of ids") from None
    except (OSError, pa.ArrowException) as exc:
        raise InputError(f"{path}: not a readable Parquet file: {exc}") from None
    names = pf.schema_arrow.names
    if column is None:
        if len(names) != 1:
            raise InputError(f"{path}: say which column holds the ids with --column; the columns are: {', '.join(names)}")
        column = names[0]
    if column not in names:
        raise InputError(f"{path}: no column '{column}'; the columns are: {', '.join(names)}")
    if names.count(column) > 1:
        raise InputError(f"{path}: column '{column}' appears {names.count(column)} times in the file; which one "
                         "holds the ids is ambiguous")
    typ = pf.schema_arrow.field(column).type
    if pa.types.is_dictionary(typ):
        typ = typ.value_type
    if not (pa.types.is_string(typ) or pa.types.is_large_string(typ) or pa.types.is_integer(typ)):
        raise InputError(f"{path}: column '{column}' is {typ}; ids must be text (or integers)")
    if pa.types.is_integer(typ):  # said, as the audit says it: the arm is the hash of the decimal text
        note(f"{path}: ids in '{column}' are integers; hashed as their decimal text")
    per_row = max(1, Path(path).stat().st_size // max(1, pf.metadata.num_rows))
    batches = pf.iter_batches(batch_size=CHUNK, columns=[column])
    while True:
        try:
            batch = next(batches)
        except StopIteration:
            return
        except (OSError, pa.ArrowException, EOFError, ValueError) as exc:
            raise InputError(f"{path}: cannot read column '{column}': the file is damaged ({exc})") from None
        col = batch.column(0)
        if not pa.types.is_string(col.type):
            col = pc.cast(col, pa.string())
        advance(per_row * len(col))
        yield col.to_pylist()


class ArmWriter:
    """Writes `unit_id,bucket,arm` rows as CSV (RFC 4180 quoting) or Parquet; or only the ids.

    Nothing is written until the first rows are ready: a file goes to a temporary name in the
    target's folder and is moved into place by `close()` (so a failed run leaves no partial
    file and never replaces a good one); on stdout the header waits for the first rows.
    `ids_only` writes one id per line, no header (the form an exclusion-list upload takes).
    """

    def __init__(self, out: str | None, *, ids_only: bool = False) -> None:
        self.out = out
        self.ids_only = ids_only
        if ids_only and out and _is_parquet(out):
            raise InputError(f"{out}: --ids-only writes one id per line of text, not Parquet; give --out a .txt or "
                             ".csv name, or leave out --ids-only for a Parquet file of ids, buckets and arms")
        self.parquet = bool(out) and _is_parquet(out or "") and not ids_only
        self._pq: Any = None  # a pyarrow ParquetWriter (pyarrow ships no type stubs)
        self._fh: IO[str] | None = None
        self._csv: Any = None  # a csv writer (its type is private to the csv module)
        self._stream: IO[str] | None = None
        self._tmp: Path | None = None  # the file written: a temporary one renamed into place, or `out` itself
        self._replace = False  # the temporary file is renamed over `out` at the end
        self.unwritable = 0  # ids_only: ids with a line break, which one-per-line cannot hold
        if out:
            target = Path(out)
            if not target.parent.is_dir():
                raise InputError(f"{out}: cannot write: folder {target.parent} does not exist")
            if target.is_dir():
                raise InputError(f"{out}: cannot write: it is a directory")
            if in_place(target):  # /dev/null, a pipe: written as it is, never replaced by a rename
                self._tmp = target
            else:
                remove_stale_temps(target)
                self._tmp, self._replace = temp_path(target), True

    def _start(self) -> None:
        """Open the output on the first write (the input has been read successfully by then)."""
        if self._stream is not None or self._pq is not None:
            return
        if self.parquet:
            return
        try:
            if self._tmp is not None:
                self._fh = open(self._tmp, "w", encoding="utf-8", newline="")  # noqa: SIM115
        except OSError as exc:
            raise InputError(f"{self.out}: cannot write: {os_error_text(exc)}") from None
        self._stream = self._fh or io.TextIOWrapper(sys.stdout.buffer, encoding="utf-8", newline="", write_through=True)
        self._csv = csv.writer(self._stream, lineterminator="\n")
        if not self.ids_only:
            self._csv.writerow(["unit_id", "bucket", "arm"])

    def write(self, ids: list[str | None], buckets: list[int | None], arms: list[str | None]) -> None:
        if self.parquet:
            import pyarrow as pa
            import pyarrow.parquet as pq

            table = pa.table({"unit_id": pa.array(ids, pa.string()), "bucket": pa.array(buckets, pa.int16()),
                              "arm": pa.array(arms, pa.string())})
            if self._pq is None:
                try:
                    self._pq = pq.ParquetWriter(str(self._tmp), table.schema)
                except OSError as exc:
                    raise InputError(f"{self.out}: cannot write: {exc}") from None
            self._pq.write_table(table)
            return
        self._start()
        assert self._stream is not None and self._csv is not None
        if self.ids_only:
            lines = [i for i in ids if i]
            ok = [i for i in lines if "\n" not in i and "\r" not in i]
            self.unwritable += len(lines) - len(ok)
            self._stream.writelines(f"{i}\n" for i in ok)
        else:
            self._csv.writerows(zip(["" if i is None else i for i in ids],
                                    ["" if b is None else b for b in buckets],
                                    ["" if a is None else a for a in arms]))

    def close(self, ok: bool = True) -> None:
        """Finish the output: move the file into place when `ok`, else remove what was written."""
        try:
            if self.parquet and ok and self._pq is None:  # no rows at all: still a valid, empty file
                import pyarrow as pa
                import pyarrow.parquet as pq

                pq.write_table(pa.table({"unit_id": pa.array([], pa.string()), "bucket": pa.array([], pa.int16()),
                                         "arm": pa.array([], pa.string())}), str(self._tmp))
            if self._pq is not None:
                self._pq.close()
            if ok and not self.parquet:
                self._start()  # an empty input still gets its header
            if self._fh is not None:
                self._fh.close()
            elif self._stream is not None:
                self._stream.flush()
                self._stream.detach()  # type: ignore[attr-defined]
            if self._tmp is not None and self.out and self._replace:
                if ok:
                    os.replace(self._tmp, self.out)
                else:
                    self._tmp.unlink(missing_ok=True)
        except OSError as exc:
            if self._tmp is not None and self._replace:
                self._tmp.unlink(missing_ok=True)
            raise InputError(f"{self.out}: cannot write: {os_error_text(exc)}") from None
