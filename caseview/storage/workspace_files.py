"""Workspace file handling beside SQL: read-only connections, verified backups, full-disk messages.

Split from :mod:`caseview.storage.workspace`; :class:`~caseview.storage.workspace.Workspace` calls these.
"""

from __future__ import annotations

import os
import sqlite3
from pathlib import Path

from ..errors import WorkspaceError
from ..private_files import create_private_file, describe_os_error, partial_path

#: An SQLite workspace's file and the files SQLite keeps beside it.
SQLITE_SUFFIXES = ("", "-wal", "-shm", "-journal")


def remove_sqlite_files(path, *also) -> None:
    """Remove ``path`` with its -wal/-shm/-journal files (and any of ``also``); missing files are fine."""
    for name in [str(path) + suffix for suffix in SQLITE_SUFFIXES] + [str(a) for a in also]:
        try:
            os.unlink(name)
        except OSError:
            pass


def disk_hint(path, exc) -> str:
    """' - the disk is full' when SQLite's error comes from a full disk (SQLITE_FULL, or an I/O error
    while the folder has almost no space left), else ''."""
    text = str(exc).lower()
    if "disk is full" in text:
        return "; the disk is full (no space left on device)"
    if "disk i/o error" in text:
        try:
            stats = os.statvfs(Path(path).absolute().parent)
        except OSError:
            return ""
        if stats.f_bavail * stats.f_frsize < 1 << 20:
            return "; the disk is full (no space left on device)"
    return ""


def connect_read_only(ws) -> sqlite3.Connection:
    """``mode=ro``; when SQLite cannot even make the shared-memory file (a read-only folder with no
    -shm beside the file), ``immutable=1``: nothing can change a file nobody can write."""
    from urllib.parse import quote

    base = "file:" + quote(str(ws.path.absolute()))
    for query in (("?mode=ro&immutable=1",) if ws._immutable else ("?mode=ro", "?mode=ro&immutable=1")):
        con = sqlite3.connect(base + query, uri=True, isolation_level=None, check_same_thread=False,
                              timeout=ws.busy_timeout_ms / 1000.0)
        try:
            con.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
            ws._immutable = "immutable" in query
            return con
        except sqlite3.OperationalError as exc:
            con.close()
            if "immutable" in query or "unable to open" not in str(exc):
                raise
    raise AssertionError("unreachable")


def backup_workspace(ws, destination, actor: str | None = None) -> Path:
    """Copy the workspace with SQLite's online backup API (consistent while others read).

    The copy is written to a 0600 partial file, checked with ``PRAGMA integrity_check`` and only
    then moved to ``destination``; the audit entry (with ``actor``) is written after that, so a
    failed or interrupted backup leaves neither a file nor an entry.
    """
    destination = Path(destination)
    if destination.exists() or destination.is_symlink():
        raise WorkspaceError(f"{destination} already exists; choose a new backup path")
    if not destination.parent.is_dir():
        raise WorkspaceError(f"{destination.parent}: folder does not exist")
    if actor is not None and ws.read_only:
        raise WorkspaceError(f"{ws.path}: the workspace is open read-only, so a backup cannot be recorded in "
                             "its audit trail; nothing was changed")
    temporary = partial_path(destination)
    placed = done = False
    try:
        temporary.unlink(missing_ok=True)
        create_private_file(temporary)
        target = sqlite3.connect(str(temporary))
        try:
            ws.connection.backup(target)
            check = target.execute("PRAGMA integrity_check").fetchall()
        finally:
            target.close()
        if check != [("ok",)]:
            raise WorkspaceError(f"backup to {destination} failed: the copy did not pass SQLite's integrity "
                                 f"check ({check[0][0]}); nothing was kept")
        os.replace(temporary, destination)
        placed = True
        if actor is not None:
            # the trail is append-only: the copy's name only (folders can name people), withheld when it may
            # hold an identifier, with the copy's SHA-256 to identify it exactly
            import hashlib

            from ..privacy.file_names import audited_file_name

            with open(destination, "rb") as copy:   # the copy, not a live workspace (no locks to lose)
                digest = hashlib.file_digest(copy, "sha256").hexdigest()
            ws.audit_append(actor, "workspace.backup", ws.path.name,
                            {"destination": audited_file_name(destination.name, digest), "sha256": digest,
                             "integrity_check": "ok"})
        done = True
    except sqlite3.Error as exc:
        raise WorkspaceError(f"backup to {destination} failed ({exc}); nothing was kept") from None
    except OSError as exc:
        raise WorkspaceError(describe_os_error(destination, exc)) from None
    finally:
        # the entry could not be written: the copy goes too
        remove_sqlite_files(temporary, *([destination] if placed and not done else []))
    return destination
