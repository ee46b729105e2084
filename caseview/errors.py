"""Errors the user sees as a one-line message (never a traceback)."""

from __future__ import annotations


class CaseviewError(Exception):
    """An error with a message meant for the user. The CLI prints it and exits non-zero."""

    exit_code = 2


class InputError(CaseviewError):
    """Bad input: a file, a value or an option. The message names where and what was expected."""


class WorkspaceError(CaseviewError):
    """The workspace cannot be used as asked (missing, not a workspace, busy, newer version)."""


class WorkspaceBusy(WorkspaceError):
    """Another process holds the workspace's write lock."""

    exit_code = 3


class Cancelled(Exception):
    """Raised from a progress callback to stop a long computation cleanly."""
