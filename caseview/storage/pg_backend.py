"""What a PostgreSQL workspace does differently from a SQLite file (connect, create, open, lock, check).

:class:`~caseview.storage.workspace.Workspace` calls these when its location is a
:class:`~caseview.storage.location.DatabaseURL`; everything else (every read and write of the storage
modules) runs the same code on both through :class:`~caseview.storage.pg_connection.PgConnection`.

* Connecting: psycopg 3 with the URL's parts; the password comes from libpq's own sources
  (PGPASSWORD, the password file, a service file) or the ``password`` the window prompted for.
  Session settings: UTC, ``lock_timeout`` = the workspace busy timeout.
* Writes: ``BEGIN`` then ``pg_advisory_xact_lock`` on the workspace key, so writers queue as with
  SQLite's ``BEGIN IMMEDIATE`` (one writer at a time; readers never wait). In READ COMMITTED each
  statement after the lock sees everything committed before it. A writer that waits longer than
  the busy timeout gets the "workspace busy" message.
* A consistent read (``audit verify``): ``BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY``.
* Identity and version: the one-row table ``caseview_workspace`` (:mod:`caseview.storage.pg_schema`).
* ``caseview init`` refuses a database that holds any table, view or sequence in its schema.
"""

from __future__ import annotations

import sqlite3

from ..errors import WorkspaceBusy, WorkspaceError
from . import pg_schema
from . import schema as _schema
from .location import DatabaseURL
from .pg_connection import PgConnection, as_sqlite_error

#: The advisory lock key of a workspace's write lock (PostgreSQL advisory locks are per database).
WRITE_LOCK_KEY = _schema.APPLICATION_ID


def _describe_connect_error(location: DatabaseURL, exc) -> str:
    text = " ".join(str(exc).split())
    lowered = text.lower()
    where = location.url
    if "password authentication failed" in lowered:
        return f"{where}: the server refused the password for role {location.user or '(default user)'} (nothing was changed)"
    if "no password supplied" in lowered or "fe_sendauth" in lowered:
        return (f"{where}: the server asks for a password; give it through PGPASSWORD, ~/.pgpass or a service "
                "file (never on the command line)")
    if "does not exist" in lowered and "database" in lowered:
        return f"{where}: no such database on the server (ask the administrator to create it, then run 'caseview init')"
    if "role" in lowered and "does not exist" in lowered:
        return f"{where}: the server knows no role {location.user or '(default user)'}"
    if "connection refused" in lowered or "no such file or directory" in lowered or "could not connect" in lowered \
            or "could not translate host name" in lowered or "timeout" in lowered:
        return f"{where}: cannot reach the PostgreSQL server ({text})"
    return f"{where}: cannot connect to PostgreSQL ({text})"


def connect(location: DatabaseURL, password: str | None, busy_timeout_ms: int, read_only: bool) -> PgConnection:
    """A new connection in sqlite3 shape; WorkspaceError (one line) when the server cannot be used."""
    import psycopg

    parameters = location.connection_parameters()
    if password is not None:
        parameters["password"] = password
    parameters.setdefault("connect_timeout", 10)
    parameters.setdefault("application_name", "caseview")
    try:
        raw = psycopg.connect(autocommit=True, **parameters)
    except psycopg.Error as exc:
        message, lowered = _describe_connect_error(location, exc), str(exc).lower()
        if "password authentication failed" in lowered or "no password supplied" in lowered:
            from ..errors import PasswordRequired  # the window asks for it; the command line prints the line

            login = location.user or dict(location.parameters).get("user", "")
            raise PasswordRequired(message, login, refused="authentication failed" in lowered) from None
        raise WorkspaceError(message) from None
    con = PgConnection(raw)
    try:  # one round trip: several statements without parameters go as one simple query
        raw.execute(session_settings(busy_timeout_ms, read_only))
    except psycopg.Error as exc:
        con.close()
        raise WorkspaceError(f"{location}: cannot prepare the connection ({as_sqlite_error(exc)})") from None
    return con


def session_settings(busy_timeout_ms: int, read_only: bool) -> str:
    """The session settings of every connection, as one text of statements: UTC, the lock timeout and,
    for a read-only open, read-only transactions."""
    statements = ["SET TIME ZONE 'UTC'", f"SET lock_timeout = {int(busy_timeout_ms)}"]
    if read_only:
        statements.append("SET default_transaction_read_only = on")
    return "; ".join(statements)


def begin_write(con: PgConnection) -> None:
    """Start a write transaction holding the workspace's write lock (see the module docstring)."""
    con.execute("BEGIN")
    try:
        con.execute(f"SELECT pg_advisory_xact_lock({WRITE_LOCK_KEY})")
    except sqlite3.Error:
        rollback(con)
        raise


def begin_snapshot(con: PgConnection) -> None:
    con.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY")


def rollback(con: PgConnection) -> None:
    if con.in_transaction:
        try:
            con.execute("ROLLBACK")
        except sqlite3.Error:
            pass


def _relations(con: PgConnection) -> list[str]:
    rows = con.execute(
        "SELECT c.relname FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace "
        "WHERE n.nspname = current_schema() AND c.relkind IN ('r', 'v', 'm', 'S', 'p', 'f') ORDER BY c.relname"
    ).fetchall()
    return [r[0] for r in rows]


def refuse_unless_empty(con: PgConnection, location: DatabaseURL) -> None:
    """WorkspaceError when the database already holds tables (``caseview init`` and ``copy`` need an empty one)."""
    names = _relations(con)
    if not names:
        return
    if pg_schema.META_TABLE in names:
        raise WorkspaceError(f"{location}: already holds a caseview workspace; choose an empty database "
                             "(nothing was changed)")
    shown = ", ".join(names[:5]) + (f" and {len(names) - 5} more" if len(names) > 5 else "")
    raise WorkspaceError(f"{location}: the database is not empty (it holds {shown}); caseview needs an empty "
                         "database of its own (nothing was changed)")


def create_schema(ws) -> None:
    """Inside the creating transaction: the PostgreSQL set-up, every migration, the identity row."""
    con = ws.connection
    for statement in pg_schema.setup_statements():
        con.execute(statement)
    owner = con.execute("SELECT session_user").fetchone()[0]
    from .audit import utc_now

    con.execute(f"INSERT INTO {pg_schema.META_TABLE} (application_id, schema_version, owner, created_utc) "
                "VALUES (?, 0, ?, ?)", (_schema.APPLICATION_ID, owner, utc_now()))
    apply_migrations(ws, 0)


def apply_migrations(ws, from_version: int) -> None:
    con = ws.connection
    for number, script in enumerate(_schema.MIGRATIONS[from_version:], start=from_version + 1):
        for statement in pg_schema.migration_statements(script):
            con.execute(statement)
        con.execute(f"UPDATE {pg_schema.META_TABLE} SET schema_version = ?", (number,))
    pg_schema.after_migrations(con, from_version, _schema.schema_version())


def stored_version(con: PgConnection, location: DatabaseURL) -> int:
    """The schema version of the workspace in this database; WorkspaceError when it holds none.

    One statement when the database holds a workspace (the identity row); only when that table is
    missing does a look at the catalogue say whether the database is empty or holds something else.
    """
    try:
        row = con.execute(f"SELECT application_id, schema_version FROM {pg_schema.META_TABLE}").fetchone()
    except sqlite3.DatabaseError:
        names = _relations(con)
        if pg_schema.META_TABLE in names:
            raise
        if not names:
            raise WorkspaceError(f"{location}: the database is empty, not a caseview workspace yet "
                                 "(create one first: caseview init, or New workspace in the window)") from None
        raise WorkspaceError(f"{location}: not a caseview workspace (the database holds other tables)") from None
    if row is None or int(row[0]) != _schema.APPLICATION_ID:
        raise WorkspaceError(f"{location}: not a caseview workspace (its identity row is missing or foreign)")
    return int(row[1])


def owner(con: PgConnection) -> str:
    """The role recorded as the workspace owner at ``caseview init``."""
    return con.execute(f"SELECT owner FROM {pg_schema.META_TABLE}").fetchone()[0]


def busy_message(location) -> str:
    return f"workspace busy: another caseview session is writing to {location}; try again when it finishes"


def raise_busy(location) -> None:
    raise WorkspaceBusy(busy_message(location))


def create_workspace(cls, location: DatabaseURL, model_json: str, actor: str, busy_timeout_ms, password):
    """``Workspace.create`` for PostgreSQL: the schema in an empty database, the connecting role as owner."""
    from ..modelfile import parse_model
    from . import audit as _audit

    parse_model(model_json, source="model")
    ws = cls(location, busy_timeout_ms, password=password)
    try:
        con = ws.connection
        refuse_unless_empty(con, location)
        with ws.transaction():
            create_schema(ws)
            _audit.append(con, actor, "workspace.create", location.dbname,
                          {"schema_version": _schema.schema_version(), "backend": "postgresql", "owner": owner(con)})
            ws.add_model_version(model_json, "initial model", actor, make_current=True)
    except BaseException:
        ws.close()
        raise
    return ws


def open_workspace(cls, location: DatabaseURL, busy_timeout_ms, read_only, password):
    """``Workspace.open`` for PostgreSQL: identity, version (refusing a newer one), migrations in one transaction."""
    ws = cls(location, busy_timeout_ms, read_only=bool(read_only), password=password)
    try:
        version = stored_version(ws.connection, location)
        current = _schema.schema_version()
        if version > current:
            raise WorkspaceError(f"{location}: workspace was written by a newer caseview (schema version "
                                 f"{version}; this caseview understands up to {current}); update caseview")
        if version < current and read_only:
            raise WorkspaceError(f"{location}: this workspace must be upgraded (schema version {version} to "
                                 f"{current}) and it is opened read-only; open it once with write access")
        if version < current:
            ws._migrate(version)
    except sqlite3.DatabaseError as exc:
        ws.close()
        if isinstance(exc, sqlite3.OperationalError) and "locked" in str(exc).lower():
            raise WorkspaceBusy(busy_message(location)) from None
        raise WorkspaceError(f"{location}: cannot use workspace ({exc})") from None
    except BaseException:
        ws.close()
        raise
    return ws
