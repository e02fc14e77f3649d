"""The history in PostgreSQL (`--history postgresql://...`): the SQLite file's tables and rules, shared by every runner.

Same tables (`meta`, `runs`, `readouts`), same schema version and the same guarantees: each write
is one transaction (an upsert of one row, so a killed writer leaves its row whole or absent, and
concurrent writers never lose each other's rows); the tables are created under a transaction-level
advisory lock, so two first writers cannot race; a database whose `runs` table is not armlock's,
or whose schema version is newer, is refused and left untouched. A server that cannot be reached
is an `Error:` naming the URL without its password. Needs `pip install 'armlock[postgres]'`.
"""

from __future__ import annotations

import urllib.parse
from typing import Any

from armlock.assign.errors import InputError

URL_PREFIXES = ("postgresql://", "postgres://")
CONNECT_TIMEOUT_S = 10
LOCK_TIMEOUT = "15s"  # as the SQLite file's busy timeout: a writer waits this long for another
ADVISORY_KEY = 0x61726D6C6F636B  # "armlock": one lock for creating the tables


def is_url(target: object) -> bool:
    """Whether a --history value names a PostgreSQL database rather than a file."""
    return isinstance(target, str) and target.startswith(URL_PREFIXES)


def shown(url: str) -> str:
    """The URL as messages print it: the password replaced by ***."""
    p = urllib.parse.urlsplit(url)
    if p.password is None:
        return url
    host = p.hostname or ""
    netloc = f"{p.username or ''}:***@{host}" + (f":{p.port}" if p.port else "")
    return urllib.parse.urlunsplit((p.scheme, netloc, p.path, p.query, p.fragment))


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def _connect(url: str) -> Any:
    try:
        import psycopg
    except ImportError:
        raise InputError(f"history database {shown(url)}: PostgreSQL needs the postgres extra: "
                         "pip install 'armlock[postgres]'") from None
    try:
        return psycopg.connect(url, connect_timeout=CONNECT_TIMEOUT_S)
    except psycopg.Error as exc:
        raise InputError(f"history database {shown(url)}: cannot connect ({_first_line(exc)}); check that the "
                         "server is running and the URL's host, port, database and user") from None


def _error(url: str, exc: BaseException) -> InputError:
    import psycopg

    if isinstance(exc, psycopg.errors.LockNotAvailable):
        return InputError(f"history database {shown(url)} is locked by another armlock run; retry in a moment")
    if isinstance(exc, psycopg.OperationalError):
        return InputError(f"history database {shown(url)}: the connection failed ({_first_line(exc)}); "
                          "nothing was written by this run")
    return InputError(f"history database {shown(url)}: {_first_line(exc)}")


def _tables(conn: Any) -> set[str]:
    rows = conn.execute("SELECT table_name FROM information_schema.tables WHERE table_schema = current_schema()")
    return {r[0] for r in rows}


def _check_version(conn: Any, url: str, schema_version: int) -> None:
    row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    if row is None:
        raise InputError(f"history database {shown(url)} has no schema version in its meta table; it was left "
                         "untouched. Use another database or schema for armlock's history")
    if not str(row[0]).isdigit():
        raise InputError(f"history database {shown(url)}: schema version {row[0]!r} is not a number")
    if int(row[0]) > schema_version:
        raise InputError(f"history database {shown(url)} has schema version {row[0]}, newer than this armlock "
                         f"reads ({schema_version}); upgrade armlock")


def upsert(url: str, ddls: tuple[str, ...], sql: str, params: tuple[Any, ...], schema_version: int) -> None:
    """One write: create what is missing (under the advisory lock), check the version, upsert one row."""
    import psycopg

    conn = _connect(url)
    try:
        with conn.transaction():
            conn.execute(f"SET LOCAL lock_timeout = '{LOCK_TIMEOUT}'")
            conn.execute("SELECT pg_advisory_xact_lock(%s)", (ADVISORY_KEY,))
            tables = _tables(conn)
            if tables & {"runs", "readouts"} and "meta" not in tables:
                raise InputError(f"history database {shown(url)} holds a runs or readouts table that is not "
                                 "armlock's (no meta table); it was left untouched. Use another database or schema")
            for ddl in ddls:
                conn.execute(ddl)
            conn.execute("INSERT INTO meta (key, value) VALUES ('schema_version', %s) ON CONFLICT (key) DO NOTHING",
                         (str(schema_version),))
            _check_version(conn, url, schema_version)
            conn.execute(sql.replace("?", "%s"), params)
    except psycopg.Error as exc:
        raise _error(url, exc) from None
    finally:
        conn.close()


def select(url: str, optional_table: str | None, sql: str, params: tuple[Any, ...],
           schema_version: int) -> list[tuple[Any, ...]]:
    """Rows of one query; `[]` when nothing was recorded yet (no tables, or not the optional one)."""
    import psycopg

    conn = _connect(url)
    try:
        with conn.transaction():
            tables = _tables(conn)
            if "meta" not in tables:
                if tables & {"runs", "readouts"}:
                    raise InputError(f"history database {shown(url)} holds a runs or readouts table that is not "
                                     "armlock's (no meta table). Use another database or schema")
                return []
            _check_version(conn, url, schema_version)
            if (optional_table or "runs") not in tables:
                return []
            return list(conn.execute(sql.replace("?", "%s"), params).fetchall())
    except psycopg.Error as exc:
        raise _error(url, exc) from None
    finally:
        conn.close()
