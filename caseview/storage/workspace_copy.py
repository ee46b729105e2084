"""Copy a whole workspace between backends (SQLite file <-> PostgreSQL database), row for row.

Every table the schema defines is copied with its keys unchanged: cases, contacts, earlier contact
versions and their provenance, closures, model versions, the field registry, reviews, score runs,
rules and settings, the row-digest locator and the audit trail (entries copied as stored, so the
hash chain and every row digest carry over). The destination is written in one transaction and
checked with the full audit verification before it is committed; a failed copy leaves an empty
database or no file. Afterwards the destination's trail gets one ``workspace.copy`` entry naming the
source and the source's chain head at the time of the copy.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import islice

from ..errors import WorkspaceError
from . import audit as _audit
from .location import DatabaseURL, workspace_location

#: Rows read and written per step.
ROWS_PER_STEP = 100_000
#: Tables not copied as rows: the destination makes its own identity/version record.
_NOT_COPIED = frozenset({"caseview_workspace"})


@dataclass(frozen=True)
class CopyResult:
    """What :func:`copy_workspace` copied: rows per table, the source chain head, the destination head."""

    destination: str
    rows: dict
    source_head: str
    destination_head: str
    n_entries: int
    n_records: int


def _tables(connection) -> list[str]:
    if getattr(connection, "kind", "sqlite") == "postgresql":
        rows = connection.execute("SELECT table_name FROM information_schema.tables WHERE table_schema = "
                                  "current_schema() AND table_type = 'BASE TABLE'").fetchall()
    else:
        rows = connection.execute("SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE "
                                  "'sqlite_%'").fetchall()
    return sorted(r[0] for r in rows if r[0] not in _NOT_COPIED)


def _columns(connection, table: str) -> list[tuple[str, str]]:
    """[(column name, declared type in upper case)] in table order."""
    if getattr(connection, "kind", "sqlite") == "postgresql":
        return [(n, t.upper()) for n, t in connection.execute(
            "SELECT column_name, data_type FROM information_schema.columns WHERE table_schema = current_schema() "
            "AND table_name = ? ORDER BY ordinal_position", (table,)).fetchall()]
    return [(row[1], str(row[2]).upper()) for row in connection.execute(f'PRAGMA table_info("{table}")')]


def _parents(connection, table: str) -> set[str]:
    """Tables ``table`` has foreign keys to."""
    if getattr(connection, "kind", "sqlite") == "postgresql":
        rows = connection.execute(
            "SELECT DISTINCT ccu.table_name FROM information_schema.table_constraints tc "
            "JOIN information_schema.constraint_column_usage ccu ON ccu.constraint_name = tc.constraint_name "
            "AND ccu.table_schema = tc.table_schema WHERE tc.constraint_type = 'FOREIGN KEY' "
            "AND tc.table_schema = current_schema() AND tc.table_name = ?", (table,)).fetchall()
        from .pg_schema import statement_checked_parents

        return {r[0] for r in rows} | statement_checked_parents(table)
    return {row[2] for row in connection.execute(f'PRAGMA foreign_key_list("{table}")')}


def _in_dependency_order(connection, tables: list[str]) -> list[str]:
    """Parents before children (foreign keys), otherwise by name."""
    remaining = {t: _parents(connection, t) & set(tables) - {t} for t in tables}
    ordered = []
    while remaining:
        ready = sorted(t for t, parents in remaining.items() if not parents - set(ordered))
        if not ready:
            raise WorkspaceError(f"cannot order tables for copying (a foreign-key cycle among {sorted(remaining)})")
        ordered += ready
        for t in ready:
            del remaining[t]
    return ordered


def _select(source, table: str, columns) -> str:
    names = []
    for name, declared in columns:
        # a contact widened with || on SQLite holds text-typed bytes: read every BLOB column as bytes
        if declared in ("BLOB", "BYTEA") and getattr(source, "kind", "sqlite") != "postgresql":
            names.append(f'CAST("{name}" AS BLOB)')
        else:
            names.append(f'"{name}"')
    return f'SELECT {", ".join(names)} FROM "{table}"'


def _copy_rows(source, destination, tables) -> dict:
    counts = {}
    for table in tables:
        columns = _columns(destination, table)
        source_names = {name for name, _ in _columns(source, table)}
        missing = [name for name, _ in columns if name not in source_names]
        if missing:
            raise WorkspaceError(f"cannot copy table {table}: the source has no column {missing[0]!r}")
        names = [name for name, _ in columns]
        quoted = [f'"{n}"' for n in names]
        cursor = iter(source.execute(_select(source, table, columns)))
        counts[table] = 0
        if table == "audit_log" and getattr(destination, "kind", "sqlite") == "postgresql":
            from .postgres_roles import restore_audit_rows

            rows = list(cursor)  # in one call: the server restores a trail only into an empty one
            counts[table] = restore_audit_rows(destination, names, rows) if rows else 0
            continue
        while rows := list(islice(cursor, ROWS_PER_STEP)):  # a million contacts never sit in memory at once
            counts[table] += len(rows)
            if hasattr(destination, "copy_rows"):
                destination.copy_rows(f'"{table}"', quoted, rows)
            else:
                destination.executemany(f'INSERT INTO "{table}" ({", ".join(quoted)}) VALUES '
                                        f'({", ".join("?" * len(names))})', rows)
    return counts


def _empty_destination(destination, password):
    """A new workspace object with the current schema and nothing else (refuses a non-empty target)."""
    from .workspace import Workspace

    location = workspace_location(destination)
    if isinstance(location, DatabaseURL):
        from . import pg_backend

        ws = Workspace(location, password=password)
        try:
            pg_backend.refuse_unless_empty(ws.connection, location)
        except BaseException:
            ws.close()
            raise
        return ws, lambda: None
    if location.exists() or location.is_symlink():
        raise WorkspaceError(f"{location} already exists; copy into a new path (nothing was changed)")
    if not location.parent.exists():
        raise WorkspaceError(f"{location.parent}: folder does not exist")
    from ..private_files import create_private_file
    from .workspace_files import remove_sqlite_files
    from .schema import APPLICATION_ID

    create_private_file(location)
    ws = Workspace(location)
    ws.connection.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    ws.connection.execute("PRAGMA journal_mode = WAL")

    def remove():
        ws.close()
        remove_sqlite_files(location)

    return ws, remove


def copy_workspace(source_ws, destination, actor: str, password: str | None = None) -> CopyResult:
    """Copy the open workspace ``source_ws`` into ``destination`` (a new file path or an empty database URL).

    ``password`` is the destination's (PostgreSQL), when not from libpq's own sources.
    """
    dest_ws, remove = _empty_destination(destination, password)
    source = source_ws.connection
    try:
        if dest_ws.is_own_file(source_ws.path) or str(dest_ws.path) == str(source_ws.path):
            raise WorkspaceError("the source and the destination are the same workspace (nothing was changed)")
        if source_ws.is_postgres:
            from .pg_backend import begin_snapshot

            begin_snapshot(source)
        else:
            source.execute("BEGIN")  # one consistent snapshot of the source
        try:
            with dest_ws.transaction() as con:
                if dest_ws.is_postgres:
                    from . import pg_backend

                    pg_backend.create_schema(dest_ws)
                    from .postgres_roles import begin_restore

                    begin_restore(con)  # copied rows keep who recorded them
                else:
                    dest_ws._apply_migrations(0)
                tables = [t for t in _in_dependency_order(con, _tables(con)) if t in set(_tables(source))]
                rows = _copy_rows(source, con, tables)
                source_head = _audit.head(source)
                check = _audit.verify(con, rows=True)
                if not check.ok:
                    raise WorkspaceError(f"copy to {dest_ws.path} refused: the copied audit trail does not verify "
                                         f"({check.problem}); nothing was kept")
                _audit.append(con, actor, "workspace.copy", dest_ws.path.name,
                              {"source": source_ws.path.name, "source_backend": _backend(source_ws),
                               "source_head": source_head, "rows": rows})
        finally:
            if source.in_transaction:
                source.execute("COMMIT")
        head = dest_ws.audit_head()
        result = CopyResult(str(dest_ws.path), rows, source_head, head, check.n_entries, check.n_records)
        dest_ws.close()
        return result
    except BaseException:
        dest_ws.close()
        remove()
        raise


def _backend(ws) -> str:
    return "postgresql" if ws.is_postgres else "sqlite"


def backup_database(ws, destination, actor: str | None = None):
    """``Workspace.backup`` of a PostgreSQL workspace: a verified copy into a new SQLite file, recorded in
    the source's trail (as a file backup is) when ``actor`` is given."""
    from pathlib import Path

    destination = Path(destination)
    result = copy_workspace(ws, destination, actor or "caseview")
    if actor is not None:
        import hashlib

        with open(destination, "rb") as copy:  # the finished copy, not a live workspace
            digest = hashlib.file_digest(copy, "sha256").hexdigest()
        from ..privacy.file_names import audited_file_name

        ws.audit_append(actor, "workspace.backup", ws.path.name,
                        {"destination": audited_file_name(destination.name, digest), "sha256": digest,
                         "source_head": result.source_head, "audit_verified": True})
    return destination
