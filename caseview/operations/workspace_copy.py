"""Copy a whole workspace to another backend: the one function the ``copy`` command (and any window
action) calls. The SQL side is :func:`caseview.storage.workspace_copy.copy_workspace`."""

from __future__ import annotations

from caseview.storage.workspace_copy import CopyResult


def copy_workspace(source, destination, actor: str, source_password: str | None = None,
                   destination_password: str | None = None) -> CopyResult:
    """Copy workspace ``source`` (file path or PostgreSQL URL) to ``destination`` (a new file path or an
    empty database), verifying the audit chain and every record at the destination before keeping it.

    Refuses (WorkspaceError, one line, nothing changed) an existing destination file, a database that is
    not empty, or a copy whose trail does not verify.
    """
    from caseview.storage import Workspace
    from caseview.storage.workspace_copy import copy_workspace as copy_rows

    with Workspace.open(source, password=source_password) as ws:
        return copy_rows(ws, destination, actor, password=destination_password)
