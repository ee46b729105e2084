"""The workspace: one SQLite file holding cases, contacts, model versions and the audit trail.

Storage discipline (SQLite documentation, "PRAGMA" and "Write-Ahead Logging" pages): WAL journal,
``synchronous=FULL`` (a committed transaction survives power loss), ``foreign_keys=ON``, a
``busy_timeout`` (default 5000 ms; ``CASEVIEW_BUSY_TIMEOUT_MS`` overrides it), ``application_id``
so the file identifies itself, ``user_version`` with forward migrations and an automatic online
backup before any migration. Every multi-row write runs inside :meth:`Workspace.transaction`
(``BEGIN IMMEDIATE``), so it is all or nothing even when the process is killed.

One SQLite connection per thread (``Workspace.connection``).

A workspace may also live in a PostgreSQL database (``Workspace.open("postgresql://host/db")``): the
same class, the same storage code, with what differs (connecting, identity and version, locking,
the translated schema) in :mod:`caseview.storage.pg_backend` and :mod:`caseview.storage.pg_schema`.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import sqlite3
import threading
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError, WorkspaceBusy, WorkspaceError
from . import audit as _audit
from . import schema as _schema
from .caseload import Caseload, load_caseload
from .contacts import register_model_fields
from .filesystem import network_warning
from .location import DatabaseURL, workspace_location
from .row_digests import LAYOUT_TABLES, RowChanges
from .workspace_files import (SQLITE_SUFFIXES, backup_workspace, connect_read_only, disk_hint,
                              remove_sqlite_files)

DEFAULT_BUSY_TIMEOUT_MS = 5000


@dataclass(frozen=True)
class ModelVersion:
    id: int
    created_utc: str
    note: str
    json_text: str
    fit_summary: dict | None
    is_current: bool


def _busy_message(path) -> str:
    return f"workspace busy: another caseview process is writing to {path}; try again when it finishes"


def _is_busy(exc: sqlite3.OperationalError) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


class Workspace:
    """An open workspace. Use :meth:`create` or :meth:`open`; close with :meth:`close` or ``with``."""

    def __init__(self, path, busy_timeout_ms: int | None = None, read_only: bool = False,
                 password: str | None = None):
        #: a Path (SQLite file) or a DatabaseURL (PostgreSQL); both have ``.name`` and print as given
        self.path = workspace_location(path)
        self.is_postgres = isinstance(self.path, DatabaseURL)
        self._password = password  # PostgreSQL only (the window's prompt); never stored elsewhere
        self.read_only = bool(read_only)
        self._immutable = False
        if busy_timeout_ms is None:
            busy_timeout_ms = int(os.environ.get("CASEVIEW_BUSY_TIMEOUT_MS", DEFAULT_BUSY_TIMEOUT_MS))
        self.busy_timeout_ms = int(busy_timeout_ms)
        self.warnings: list[str] = []
        self._local = threading.local()
        self._connections: list[sqlite3.Connection] = []
        self._lock = threading.Lock()
        self._model_cache: dict[int, object] = {}
        self._closed = False

    # ------------------------------------------------------------ connections
    def _connect(self) -> sqlite3.Connection:
        if self.is_postgres:
            from . import pg_backend

            return pg_backend.connect(self.path, self._password, self.busy_timeout_ms, self.read_only)
        try:
            if self.read_only:
                con = connect_read_only(self)
            else:
                con = sqlite3.connect(str(self.path), isolation_level=None, check_same_thread=False,
                                      timeout=self.busy_timeout_ms / 1000.0)
            con.execute(f"PRAGMA busy_timeout = {self.busy_timeout_ms}")
            con.execute("PRAGMA foreign_keys = ON")
            con.execute("PRAGMA synchronous = FULL")
        except sqlite3.OperationalError as exc:
            if _is_busy(exc):
                raise WorkspaceBusy(_busy_message(self.path)) from None
            raise WorkspaceError(f"{self.path}: cannot open workspace ({exc}){disk_hint(self.path, exc)}") from None
        except sqlite3.DatabaseError as exc:
            raise WorkspaceError(f"{self.path}: not a caseview workspace ({exc})") from None
        return con

    @property
    def connection(self) -> sqlite3.Connection:
        """This thread's SQLite connection (created on first use)."""
        if self._closed:
            raise WorkspaceError(f"workspace {self.path} is closed")
        con = getattr(self._local, "connection", None)
        if con is None:
            con = self._connect()
            self._local.connection = con
            self._local.depth = 0
            with self._lock:
                self._connections.append(con)
        return con

    def close(self) -> None:
        with self._lock:
            for con in self._connections:
                try:
                    con.close()
                except (sqlite3.Error, OSError):
                    pass
            self._connections.clear()
        self._local = threading.local()
        self._closed = True

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    # ------------------------------------------------------------ open/create
    @classmethod
    def create(cls, path, model_json: str, actor: str, busy_timeout_ms: int | None = None,
               password: str | None = None) -> "Workspace":
        """Create a new workspace at ``path`` (a file path, or the URL of an empty PostgreSQL database)
        with ``model_json`` as its first (current) model."""
        from ..modelfile import parse_model

        path = workspace_location(path)
        if isinstance(path, DatabaseURL):
            from .pg_backend import create_workspace

            return create_workspace(cls, path, model_json, actor, busy_timeout_ms, password)
        if path.exists() or path.is_symlink():
            raise WorkspaceError(f"{path} already exists; choose a new workspace path (nothing was changed)")
        if not path.parent.exists():
            raise WorkspaceError(f"{path.parent}: folder does not exist")
        parse_model(model_json, source="model")  # InputError before any file is made
        from ..private_files import create_private_file

        create_private_file(path)  # 0600 from the start; SQLite gives -wal/-shm the same mode
        ws = cls(path, busy_timeout_ms)
        try:
            con = ws.connection
            con.execute(f"PRAGMA application_id = {_schema.APPLICATION_ID}")
            con.execute("PRAGMA journal_mode = WAL")
            with ws.transaction():
                ws._apply_migrations(0)
                _audit.append(con, actor, "workspace.create", str(path.name), {"schema_version": _schema.schema_version()})
                ws.add_model_version(model_json, "initial model", actor, make_current=True)
            con.execute("PRAGMA wal_checkpoint(TRUNCATE)")  # the main file now identifies itself on disk
        except BaseException:
            ws.close()
            remove_sqlite_files(path)
            raise
        ws._check_network()
        return ws

    @classmethod
    def open(cls, path, busy_timeout_ms: int | None = None, read_only: bool | None = None,
             password: str | None = None) -> "Workspace":
        """Open an existing workspace, migrating it forward (after a backup) if it is older.

        ``path`` is a file path or a PostgreSQL URL (``postgresql://[user@]host[:port]/dbname``, or
        ``postgresql:///dbname?host=/socket/dir``); ``password`` is for PostgreSQL only (otherwise
        libpq's PGPASSWORD / password file / service file apply).

        ``read_only``: True opens it for reading only (SQLite ``mode=ro``; writes are refused); None
        (default) does so when the file or its folder cannot be written (a read-only file system or
        permissions), False never.
        """
        path = workspace_location(path)
        if isinstance(path, DatabaseURL):
            from .pg_backend import open_workspace

            return open_workspace(cls, path, busy_timeout_ms, read_only, password)
        if not path.exists():
            raise WorkspaceError(f"{path}: no such workspace (create one with 'caseview init')")
        if not path.is_file():
            raise WorkspaceError(f"{path}: not a file, so not a caseview workspace")
        if read_only is None:
            read_only = not (os.access(path, os.W_OK) and os.access(path.absolute().parent, os.W_OK))
        # The header is read through SQLite, never with a plain open(): closing any descriptor of the
        # file drops every POSIX lock this process holds on it, so another process would think it
        # is the last user and delete the WAL under our other connections (SQLite, "How To Corrupt
        # An SQLite Database File", section 2.2). In WAL mode the newest header may also sit in the -wal.
        ws = cls(path, busy_timeout_ms, read_only=read_only)
        try:
            con = ws.connection
            try:
                application_id = con.execute("PRAGMA application_id").fetchone()[0]
            except sqlite3.DatabaseError as exc:
                if "not a database" in str(exc) or "file is encrypted" in str(exc):
                    raise WorkspaceError(f"{path}: not a caseview workspace (not an SQLite database file)") from None
                raise
            if application_id != _schema.APPLICATION_ID:
                raise WorkspaceError(f"{path}: not a caseview workspace (an SQLite file of another program)")
            version = con.execute("PRAGMA user_version").fetchone()[0]
            current = _schema.schema_version()
            if version > current:
                raise WorkspaceError(f"{path}: workspace was written by a newer caseview (schema version {version}; "
                                     f"this caseview understands up to {current}); update caseview")
            if version < current and read_only:
                raise WorkspaceError(f"{path}: this workspace must be upgraded (schema version {version} to {current}) "
                                     "and it is read-only here; open it once with write access (nothing was changed)")
            if version < current:
                ws._migrate(version)
            mode = con.execute("PRAGMA journal_mode").fetchone()[0]
            if str(mode).lower() != "wal" and not read_only:
                con.execute("PRAGMA journal_mode = WAL")
        except sqlite3.DatabaseError as exc:
            ws.close()
            if isinstance(exc, sqlite3.OperationalError) and _is_busy(exc):
                raise WorkspaceBusy(_busy_message(path)) from None
            raise WorkspaceError(f"{path}: cannot use workspace ({exc}){disk_hint(path, exc)}") from None
        except BaseException:
            ws.close()
            raise
        ws._check_network()
        return ws

    def is_own_file(self, path) -> bool:
        """True when ``path`` is this workspace's file or its -wal/-shm/-journal (compared with stat, never opened)."""
        if self.is_postgres or isinstance(path, DatabaseURL):
            return False
        for suffix in SQLITE_SUFFIXES:
            try:
                if os.path.samefile(path, str(self.path) + suffix):
                    return True
            except OSError:
                continue
        return False

    def _check_network(self) -> None:
        if self.is_postgres:
            return
        warning = network_warning(self.path)
        if warning:
            self.warnings.append(warning)

    def _apply_migrations(self, from_version: int) -> None:
        if self.is_postgres:
            from . import pg_backend

            return pg_backend.apply_migrations(self, from_version)
        con = self.connection
        for number, script in enumerate(_schema.MIGRATIONS[from_version:], start=from_version + 1):
            for statement in _split_sql(script):
                con.execute(statement)
            con.execute(f"PRAGMA user_version = {number}")

    def _migrate(self, from_version: int) -> None:
        digests_from = _schema.MIGRATIONS.index(_schema.ROW_DIGESTS) + 1
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
        if self.is_postgres:  # DDL is transactional there: the upgrade is all or nothing, no file copy
            backup_path = None
        else:
            backup_path = self.path.with_name(f"{self.path.name}.v{from_version}-backup-{stamp}")
            self.backup(backup_path, actor=None)
        with self.transaction():
            self._apply_migrations(from_version)
            if from_version < _schema.MIGRATIONS.index(_schema.CASE_PACKS) + 1:  # pack the stored contacts
                from .case_packs import rebuild_case_packs

                rebuild_case_packs(self.connection)
            _audit.append(self.connection, "caseview", "workspace.migrate", self.path.name,
                          {"from_version": from_version, "to_version": _schema.schema_version(),
                           "backup": backup_path.name if backup_path else None})
            if from_version < digests_from:  # records made before row digests: the trail takes them as they are
                _audit.append(self.connection, "caseview", "audit.baseline", self.path.name,
                              {"note": "baseline digest of existing rows"}, changes=RowChanges.everything())
        self.warnings.append(f"workspace upgraded from schema version {from_version} to "
                             f"{_schema.schema_version()}" + (f"; the old file was kept as {backup_path}"
                                                              if backup_path else " in one transaction"))

    # ------------------------------------------------------------ transactions
    @contextmanager
    def transaction(self):
        """``BEGIN IMMEDIATE`` ... ``COMMIT`` (``ROLLBACK`` on any exception); nested calls join."""
        con = self.connection
        if self.read_only:
            raise WorkspaceError(f"{self.path}: the workspace is open read-only (the file or its folder cannot be "
                                 "written); nothing was changed")
        if self._local.depth:
            self._local.depth += 1
            try:
                yield con
            finally:
                self._local.depth -= 1
            return
        try:
            if self.is_postgres:
                from .pg_backend import begin_write

                begin_write(con)
            else:
                con.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            if _is_busy(exc):
                raise WorkspaceBusy(_busy_message(self.path)) from None
            raise WorkspaceError(f"{self.path}: cannot start a write ({exc})") from None
        self._local.depth = 1
        try:
            yield con
        except sqlite3.DatabaseError as exc:  # never a silent or raw SQLite error for the user
            self._local.depth = 0
            self._rollback(con)
            if isinstance(exc, sqlite3.OperationalError) and _is_busy(exc):
                raise WorkspaceBusy(_busy_message(self.path)) from None
            raise WorkspaceError(f"{self.path}: write failed, nothing was changed ({exc}){disk_hint(self.path, exc)}"
                                 ) from None
        except BaseException:
            self._local.depth = 0
            self._rollback(con)
            raise
        self._local.depth = 0
        try:
            con.execute("COMMIT")
        except sqlite3.OperationalError as exc:
            if con.in_transaction:
                con.execute("ROLLBACK")
            if _is_busy(exc):
                raise WorkspaceBusy(_busy_message(self.path)) from None
            raise WorkspaceError(f"{self.path}: write failed, nothing was changed ({exc}){disk_hint(self.path, exc)}"
                                 ) from None

    @staticmethod
    def _rollback(con) -> None:
        if con.in_transaction:
            try:
                con.execute("ROLLBACK")
            except sqlite3.Error:  # SQLite already rolled back (e.g. after a disk error)
                pass

    # ------------------------------------------------------------ backup
    def backup(self, destination, actor: str | None = None) -> Path:
        """Copy the workspace: complete, checked, then recorded (see :func:`.workspace_files.backup_workspace`).

        A PostgreSQL workspace is copied into a new SQLite file (:func:`.workspace_copy.copy_workspace`)."""
        if self.is_postgres:
            from .workspace_copy import backup_database

            return backup_database(self, destination, actor)
        return backup_workspace(self, destination, actor)

    # ------------------------------------------------------------ models
    def _version(self, row) -> ModelVersion:
        return ModelVersion(id=row[0], created_utc=row[1], note=row[2], json_text=row[3],
                            fit_summary=json.loads(row[4]) if row[4] else None, is_current=bool(row[5]))

    def model_versions(self) -> list[ModelVersion]:
        rows = self.connection.execute("SELECT id, created_utc, note, json_text, fit_summary, is_current "
                                       "FROM model_versions ORDER BY id").fetchall()
        return [self._version(r) for r in rows]

    def current_model(self):
        """The current model and its version record: ``(hmm.StageModel, ModelVersion)``."""
        from ..modelfile import parse_model

        row = self.connection.execute("SELECT id, created_utc, note, json_text, fit_summary, is_current "
                                      "FROM model_versions WHERE is_current = 1").fetchone()
        if row is None:
            raise WorkspaceError(f"{self.path}: workspace has no current model")
        version = self._version(row)
        if version.id not in self._model_cache:
            self._model_cache[version.id] = parse_model(version.json_text, source=f"model version {version.id}")
        return self._model_cache[version.id], version

    def add_model_version(self, json_text: str, note: str, actor: str, fit_summary: dict | None = None,
                          make_current: bool = True) -> int:
        """Store a model version (validated first); audited as ``model.add`` or ``model.fit``."""
        from ..modelfile import parse_model

        model = parse_model(json_text, source="model")
        summary = _audit.canonical_json(fit_summary) if fit_summary is not None else None
        with self.transaction() as con:
            width = con.execute("SELECT (SELECT COUNT(*) FROM channels), (SELECT COUNT(*) FROM covariates)").fetchone()
            register_model_fields(con, model)
            widened = width != con.execute("SELECT (SELECT COUNT(*) FROM channels), "
                                           "(SELECT COUNT(*) FROM covariates)").fetchone()
            old = con.execute("SELECT id FROM model_versions WHERE is_current = 1").fetchone()
            version_id = con.execute(
                "INSERT INTO model_versions (created_utc, note, json_text, fit_summary, is_current) "
                "VALUES (?, ?, ?, ?, 0)", (_audit.utc_now(), note or "", json_text, summary)).lastrowid
            if make_current:
                con.execute("UPDATE model_versions SET is_current = 0 WHERE is_current = 1")
                con.execute("UPDATE model_versions SET is_current = 1 WHERE id = ?", (version_id,))
            details = {"version": version_id, "note": note or "", "name": model.name, "make_current": make_current,
                       "model_sha256": hashlib.sha256(json_text.encode("utf-8")).hexdigest()}
            if fit_summary is not None:
                details["fit_summary"] = fit_summary
            changes = RowChanges(rows={"model_versions": [version_id] + ([old[0]] if old else [])},
                                 all_rows=LAYOUT_TABLES, all_cases=widened)  # new fields widen every contact
            _audit.append(con, actor, "model.fit" if fit_summary is not None else "model.add",
                          f"model:{version_id}", details, changes=changes)
        return version_id

    def set_current_model(self, version_id: int, actor: str) -> None:
        with self.transaction() as con:
            row = con.execute("SELECT id FROM model_versions WHERE id = ?", (int(version_id),)).fetchone()
            if row is None:
                raise InputError(f"model version {version_id} does not exist "
                                 f"(versions: {', '.join(str(v.id) for v in self.model_versions())})")
            old = con.execute("SELECT id FROM model_versions WHERE is_current = 1").fetchone()
            con.execute("UPDATE model_versions SET is_current = 0 WHERE is_current = 1")
            con.execute("UPDATE model_versions SET is_current = 1 WHERE id = ?", (int(version_id),))
            _audit.append(con, actor, "model.current", f"model:{version_id}",
                          {"version": int(version_id), "previous": old[0] if old else None},
                          changes=RowChanges(rows={"model_versions": [int(version_id)] + ([old[0]] if old else [])}))

    # ------------------------------------------------------------ contacts
    def load_caseload(self, model, as_of_day: int | None = None) -> Caseload:
        return load_caseload(self.connection, model, as_of_day)

    def load_case(self, model, case_code: str, as_of_day: int | None = None) -> Caseload:
        """One case's current contacts only (an empty caseload if none), read by its index."""
        from .caseload import load_case

        return load_case(self.connection, model, case_code, as_of_day)

    def open_case_mask(self, case_codes, as_of_day: int | None):
        """Which of ``case_codes`` are open on ``as_of_day`` (see :func:`.casework_store.open_case_mask`)."""
        from .casework_store import open_case_mask

        return open_case_mask(self.connection, case_codes, as_of_day)

    def find_case(self, typed: str) -> str:
        """The stored case ID that ``typed`` names (normalised and matched like an imported case ID,
        letter case ignored); InputError with one line (``no case 'X' in WS; did you mean 'Y'?``)
        otherwise. Every command or form that takes a case ID from a person calls this."""
        from .case_lookup import find_case_code

        return find_case_code(self.connection, typed, str(self.path))

    def find_coordinator(self, typed: str) -> str:
        """The stored coordinator code that ``typed`` names (same normalisation, letter case ignored);
        InputError naming the known coordinators otherwise."""
        from .case_lookup import find_coordinator_code

        return find_coordinator_code(self.connection, typed, str(self.path))

    def case_count(self) -> int:
        return self.connection.execute("SELECT COUNT(*) FROM cases").fetchone()[0]

    def contact_count(self) -> int:
        return self.connection.execute("SELECT COUNT(*) FROM contacts").fetchone()[0]

    def write_contacts(self, batch, replace: bool = False, actor: str = "", reason: str = ""):
        """Store a validated :class:`~caseview.storage.contact_writer.ContactBatch` (inside a transaction).

        Replaced contacts keep their earlier version (superseded, by ``actor`` for ``reason``)."""
        import gc

        from .contact_writer import write_contacts

        gc_was_enabled = gc.isenabled()
        gc.disable()  # the write creates millions of short-lived tuples
        try:
            with self.transaction() as con:
                return write_contacts(con, batch, replace, actor, reason)
        finally:
            if gc_was_enabled:
                gc.enable()

    def stored_contacts(self, as_of_day: int | None = None):
        """All stored contacts as arrays (:class:`~caseview.storage.contacts.StoredContacts`)."""
        from .contacts import fetch_contacts

        return fetch_contacts(self.connection, as_of_day)

    def check_case_packs(self) -> tuple[int, str]:
        """(cases compared, first problem or '') of the packed contacts against the rows (:mod:`.case_packs`)."""
        from .case_packs import check_case_packs

        return check_case_packs(self.connection)

    def integrity_check(self) -> str:
        return self.integrity_report(1)[0]

    def integrity_report(self, max_problems: int = 100) -> list:
        """SQLite's ``PRAGMA integrity_check``: ``["ok"]`` or up to ``max_problems`` descriptions.

        On PostgreSQL the server keeps pages and indexes consistent itself: the check is that the
        workspace's tables can be read (the audit verification then checks every record)."""
        if self.is_postgres:
            self.connection.execute("SELECT COUNT(*) FROM audit_log").fetchone()
            return ["ok"]
        return [row[0] for row in self.connection.execute(f"PRAGMA integrity_check({int(max_problems)})")]

    # ------------------------------------------------------------ audit
    def audit_append(self, actor: str, action: str, target: str, details: dict, changes: RowChanges | None = None,
                     at_utc: str | None = None) -> _audit.AuditEntry:
        """Append an audit entry; ``changes`` names the protected rows this write changed (see
        :class:`caseview.storage.row_digests.RowChanges`; call after writing them, same transaction)."""
        with self.transaction() as con:
            return _audit.append(con, actor, action, target, details, changes=changes, at_utc=at_utc)

    def next_audit_entry_id(self) -> int:
        """Id the next audit entry will get (stable inside a write transaction)."""
        return _audit.next_entry_id(self.connection)

    def audit_entries(self, case_id: str | None = None, since_utc: str | None = None) -> list[_audit.AuditEntry]:
        return _audit.entries(self.connection, case_id, since_utc)

    def audit_verify(self, rows: bool = True) -> _audit.AuditVerification:
        """The chain and (with ``rows``) every protected record against the trail, in one read snapshot."""
        con = self.connection
        if con.in_transaction:
            return _audit.verify(con, rows)
        if self.is_postgres:
            from .pg_backend import begin_snapshot

            begin_snapshot(con)
        else:
            con.execute("BEGIN")  # one consistent snapshot while others write
        try:
            return _audit.verify(con, rows)
        finally:
            con.execute("COMMIT")

    def audit_position(self, entry_hash: str) -> tuple[int | None, int]:
        """(id of the entry with ``entry_hash`` or None, id of the newest entry)."""
        return _audit.position_of(self.connection, entry_hash)

    def audit_head(self) -> str:
        return _audit.head(self.connection)

    # ------------------------------------------------------------ settings
    def get_setting(self, key: str, default=None):
        row = self.connection.execute("SELECT value FROM settings WHERE key = ?", (key,)).fetchone()
        return default if row is None else json.loads(row[0])

    def set_setting(self, key: str, value, actor: str) -> None:
        text = _audit.canonical_json(value)
        with self.transaction() as con:
            row = con.execute("SELECT value FROM settings WHERE key = ?", (key,)).fetchone()
            con.execute("INSERT INTO settings (key, value) VALUES (?, ?) "
                        "ON CONFLICT(key) DO UPDATE SET value = excluded.value", (key, text))
            _audit.append(con, actor, "setting.change", f"setting:{key}",
                          {"key": key, "old": json.loads(row[0]) if row else None, "new": value},
                          changes=RowChanges(rows={"settings": [key]}))


def _split_sql(script: str) -> list[str]:
    """Split a migration script into statements (triggers keep their BEGIN ... END bodies)."""
    statements, current = [], ""
    for line in script.splitlines(keepends=True):
        current += line
        if sqlite3.complete_statement(current):
            if current.strip():
                statements.append(current.strip())
            current = ""
    if current.strip():
        statements.append(current.strip())
    return statements
