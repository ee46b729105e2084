"""A PostgreSQL connection that the storage modules use exactly like their SQLite connection.

The storage modules are written against the Python DB-API shape of :mod:`sqlite3`
(``connection.execute(sql, params)`` returning a cursor with ``fetchone``/``fetchall``/iteration,
``lastrowid``, ``rowcount``; ``executemany``; ``in_transaction``). :class:`PgConnection` gives a
psycopg 3 connection that shape and translates the few SQLite dialect points the storage SQL uses
(done once per distinct statement and cached):

* ``?`` placeholders become ``%s`` (and a literal ``%`` becomes ``%%``);
* ``INSERT OR IGNORE INTO ...`` becomes ``INSERT INTO ... ON CONFLICT DO NOTHING``;
* ``CAST(x AS BLOB)`` becomes ``CAST(x AS bytea)``;
* ``PRAGMA defer_foreign_keys = ON`` becomes ``SET CONSTRAINTS ALL DEFERRED`` (the PostgreSQL
  schema declares those foreign keys DEFERRABLE, :mod:`caseview.storage.pg_schema`);
* ``lastrowid``: an ``INSERT`` into a table with an ``id`` key gets ``RETURNING id``.

Errors are re-raised as the matching :mod:`sqlite3` exception class (``OperationalError`` for a
lock timeout, with "locked" in the text; ``IntegrityError`` for constraint violations; else
``DatabaseError``), so :class:`~caseview.storage.workspace.Workspace` turns them into the same
one-line messages on both backends. The original psycopg error is kept as ``__cause__``.
"""

from __future__ import annotations

import re
import sqlite3

import psycopg
from psycopg import errors as pg_errors

#: Tables whose key is an ``id`` column filled in on insert (SQLite ``INTEGER PRIMARY KEY``).
ID_TABLES = frozenset({"model_versions", "channels", "covariates", "coordinators", "cases", "audit_log", "reviews",
                       "score_runs", "contact_versions"})

#: ``executemany`` of more rows than this uses COPY (:meth:`PgConnection.executemany`).
BULK_ROWS = 1000
_BULK_INSERT = re.compile(r"^INSERT\s+(?P<ignore>OR\s+IGNORE\s+)?INTO\s+(?P<table>\w+)\s*\((?P<columns>[\w\s,]+)\)\s*"
                          r"VALUES\s*\([\s?,]+\)(?P<tail>\s+ON\s+CONFLICT.*)?$", re.IGNORECASE | re.DOTALL)
_INSERT_TABLE = re.compile(r"^\s*INSERT\s+(?:OR\s+IGNORE\s+)?INTO\s+(\w+)", re.IGNORECASE)
_CAST_BLOB = re.compile(r"\bAS\s+BLOB\)", re.IGNORECASE)


def _placeholders(sql: str) -> str:
    """``?`` -> ``%s`` and ``%`` -> ``%%`` outside quoted text; ``%`` inside quotes is doubled too
    (psycopg reads every ``%`` of a query with parameters)."""
    out = []
    quote = None
    for ch in sql:
        if quote:
            out.append("%%" if ch == "%" else ch)
            if ch == quote:
                quote = None
            continue
        if ch in ("'", '"'):
            quote = ch
            out.append(ch)
        elif ch == "?":
            out.append("%s")
        elif ch == "%":
            out.append("%%")
        else:
            out.append(ch)
    return "".join(out)


def translate(sql: str) -> tuple[str, bool]:
    """(PostgreSQL text, whether it returns the new row's id) for one SQLite-dialect statement."""
    text = sql.strip()
    upper = text.upper()
    if upper.startswith("PRAGMA DEFER_FOREIGN_KEYS"):
        return "SET CONSTRAINTS ALL DEFERRED", False
    if upper.startswith("PRAGMA"):
        raise sqlite3.OperationalError(f"SQLite statement used on PostgreSQL: {text[:60]}")
    returns_id = False
    match = _INSERT_TABLE.match(text)
    if match:
        if re.match(r"^\s*INSERT\s+OR\s+IGNORE\s+INTO", text, re.IGNORECASE):
            text = re.sub(r"^\s*INSERT\s+OR\s+IGNORE\s+INTO", "INSERT INTO", text, count=1, flags=re.IGNORECASE)
            text += " ON CONFLICT DO NOTHING"
        if match.group(1).lower() in ID_TABLES and "RETURNING" not in upper:
            text += " RETURNING id"
            returns_id = True
    text = _CAST_BLOB.sub("AS bytea)", text)
    return _placeholders(text), returns_id


_CACHE: dict = {}


def _translated(sql: str) -> tuple[str, bool]:
    found = _CACHE.get(sql)
    if found is None:
        found = _CACHE[sql] = translate(sql)
    return found


def as_sqlite_error(exc: psycopg.Error) -> sqlite3.Error:
    """The :mod:`sqlite3` exception class matching a psycopg error (same one-line text)."""
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if isinstance(exc, pg_errors.InsufficientPrivilege):  # the team roles (caseview.storage.postgres_roles)
        from ..errors import WorkspaceError

        return WorkspaceError(f"the server refused: {text} (your login's role in this team workspace does not "
                              "allow it; nothing was changed)")
    if isinstance(exc, (pg_errors.LockNotAvailable, pg_errors.DeadlockDetected, pg_errors.SerializationFailure)):
        return sqlite3.OperationalError(f"database is locked ({text})")
    if isinstance(exc, psycopg.IntegrityError):
        return sqlite3.IntegrityError(text)
    if isinstance(exc, psycopg.OperationalError):
        return sqlite3.OperationalError(text)
    return sqlite3.DatabaseError(text)


class PgCursor:
    """The result of :meth:`PgConnection.execute` (rows are fetched eagerly, like a client cursor)."""

    def __init__(self, cursor, returns_id: bool):
        self._cursor = cursor
        self.rowcount = cursor.rowcount
        self.lastrowid = None
        if returns_id:
            rows = cursor.fetchall()
            self.lastrowid = rows[-1][0] if rows else None
            self._rows = iter(())
        else:
            self._rows = iter(cursor.fetchall() if cursor.description is not None else ())

    def fetchone(self):
        return next(self._rows, None)

    def fetchall(self) -> list:
        return list(self._rows)

    def __iter__(self):
        return self._rows


class PgConnection:
    """A psycopg 3 connection (autocommit; transactions are explicit BEGIN/COMMIT) in sqlite3 shape."""

    kind = "postgresql"

    def __init__(self, raw: psycopg.Connection):
        self.raw = raw

    # -------------------------------------------------------------- statements
    def execute(self, sql: str, params=()) -> PgCursor:
        text, returns_id = _translated(sql)
        try:
            cursor = self.raw.cursor()
            cursor.execute(text, tuple(params) if params is not None else ())
            return PgCursor(cursor, returns_id)
        except psycopg.Error as exc:
            raise as_sqlite_error(exc) from exc

    def executemany(self, sql: str, seq_of_params) -> None:
        """Many rows: a plain ``INSERT ... VALUES (?, ...)`` of more than :data:`BULK_ROWS` rows goes
        through ``COPY`` (straight into the table, or through a temporary table when the statement has an
        ``ON CONFLICT`` clause); anything else is psycopg's pipelined ``executemany``."""
        text, _ = _translated(sql)
        rows = [tuple(p) for p in seq_of_params]
        if not rows:
            return
        bulk = _BULK_INSERT.match(sql.strip()) if len(rows) > BULK_ROWS else None
        try:
            if bulk:
                self._bulk_insert(bulk, rows)
                return
            with self.raw.cursor() as cursor:
                cursor.executemany(text.replace(" RETURNING id", ""), rows)
        except psycopg.Error as exc:
            raise as_sqlite_error(exc) from exc

    def _bulk_insert(self, match, rows) -> None:
        table, columns, tail = match.group("table"), match.group("columns"), match.group("tail") or ""
        ignore = bool(match.group("ignore"))
        names = [c.strip() for c in columns.split(",")]
        if not tail.strip() and not ignore:
            self.copy_rows(table, names, rows)
            return
        if ignore:
            tail = " ON CONFLICT DO NOTHING"
        with self.raw.cursor() as cursor:
            cursor.execute(f"CREATE TEMP TABLE IF NOT EXISTS _bulk_{table} AS SELECT {columns} FROM {table} WITH NO DATA")
            cursor.execute(f"TRUNCATE _bulk_{table}")
            with cursor.copy(f"COPY _bulk_{table} ({columns}) FROM STDIN") as copy:
                for row in rows:
                    copy.write_row(row)
            cursor.execute(f"INSERT INTO {table} ({columns}) SELECT {columns} FROM _bulk_{table}{tail}")
            cursor.execute(f"TRUNCATE _bulk_{table}")

    def copy_rows(self, table: str, columns, rows) -> None:
        """``COPY table (columns) FROM STDIN`` (binary) with ``rows``: the bulk path of large imports."""
        names = ", ".join(columns)
        try:
            with self.raw.cursor() as cursor:
                with cursor.copy(f"COPY {table} ({names}) FROM STDIN") as copy:
                    for row in rows:
                        copy.write_row(row)
        except psycopg.Error as exc:
            raise as_sqlite_error(exc) from exc

    def copy_out(self, query: str, params=()) -> bytes:
        """``COPY (query) TO STDOUT (FORMAT binary)``: the whole result as PostgreSQL's binary copy bytes."""
        text = _placeholders(query)
        try:
            with self.raw.cursor() as cursor:
                with cursor.copy(f"COPY ({text}) TO STDOUT (FORMAT binary)", tuple(params)) as copy:
                    return b"".join(bytes(chunk) for chunk in copy)
        except psycopg.Error as exc:
            raise as_sqlite_error(exc) from exc

    # -------------------------------------------------------------- state
    @property
    def in_transaction(self) -> bool:
        return self.raw.info.transaction_status != psycopg.pq.TransactionStatus.IDLE

    def audit_actor(self, given: str) -> str:
        """The actor an audit entry records on this connection (see :func:`caseview.storage.audit.append`).

        Not what is stored: on PostgreSQL the server's ``caseview_audit_append`` records ``session_user``
        whatever the client gives (:mod:`caseview.storage.postgres_roles`).
        """
        return given

    def close(self) -> None:
        try:
            self.raw.close()
        except psycopg.Error:
            pass
