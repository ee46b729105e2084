"""Errors the user sees as a one-line message (never a traceback)."""

from __future__ import annotations


class CaseviewError(Exception):
    """An error with a message meant for the user. The CLI prints it and exits non-zero."""

    exit_code = 2


class InputError(CaseviewError):
    """Bad input: a file, a value or an option. The message names where and what was expected."""


class WorkspaceError(CaseviewError):
    """The workspace cannot be used as asked (missing, not a workspace, busy, newer version)."""


class PasswordRequired(WorkspaceError):
    """A PostgreSQL server asks for a password it was not given, or refused the one given
    (``refused`` is True then); the window asks for it, the command line says where to give it."""

    def __init__(self, message: str, login: str = "", refused: bool = False):
        super().__init__(message)
        self.login = login
        self.refused = refused


class WorkspaceBusy(WorkspaceError):
    """Another process holds the workspace's write lock."""

    exit_code = 3


class Cancelled(Exception):
    """Raised from a progress callback to stop a long computation cleanly."""


#: Exit code of ``score``, ``flags`` and ``report`` when some cases cannot be scored: every other case
#: was scored and written, those cases are marked "cannot be scored" with the reason in the output and
#: named on stderr. (3 is :class:`WorkspaceBusy`.)
EXIT_CASES_NOT_SCORED = 4


class FitRefused(CaseviewError):
    """A fit that cannot be run or whose result cannot be saved (nothing was saved)."""

    exit_code = 1


class CaseNotScored(CaseviewError):
    """The case asked about cannot be scored (the message gives the reason)."""

    exit_code = EXIT_CASES_NOT_SCORED
