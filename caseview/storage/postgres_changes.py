"""Colleagues' changes to a PostgreSQL workspace, as they commit (LISTEN/NOTIFY).

Every audited write on PostgreSQL sends a notification on
:data:`~caseview.storage.postgres_roles.NOTIFY_CHANNEL` from inside its transaction (the server's
audit-append function), so it is delivered when, and only if, the write commits (PostgreSQL
documentation, "NOTIFY"). The payload names the changed cases by their internal keys, not by case
code; :func:`visible_case_codes` turns keys into the codes this login may see (row-level security
applies), so a coordinator learns nothing about other coordinators' cases.

:class:`ChangeFeed` holds its own connection (a listening connection must not run other work) and
is used from one thread: the window's listener thread.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from .postgres_roles import NOTIFY_CHANNEL


@dataclass(frozen=True)
class WorkspaceChange:
    """One committed change: its audit entry id, action (``contact.record`` ...), the login that made it,
    the internal keys of the cases it changed and whether it may have changed every case (an import,
    a new model)."""

    entry: int
    action: str
    by: str
    case_keys: tuple
    all_cases: bool
    from_this_session: bool = False

    @classmethod
    def from_payload(cls, payload: str, from_this_session: bool = False) -> "WorkspaceChange":
        data = json.loads(payload)
        return cls(int(data.get("entry", 0)), str(data.get("action", "")), str(data.get("by", "")),
                   tuple(int(k) for k in data.get("case_keys") or ()), bool(data.get("all_cases")),
                   from_this_session)


class ChangeFeed:
    """A listening connection to the workspace's database.

    Parameters
    ----------
    location : caseview.storage.location.DatabaseURL
    password : str or None
        The password the window prompted for (None: libpq's own sources).
    own_backend_pids : callable returning a set of int, optional
        Server process ids of this window's own connections: their changes are marked
        ``from_this_session`` (the window has already shown them).
    """

    def __init__(self, location, password: str | None = None, own_backend_pids=None):
        import psycopg

        parameters = location.connection_parameters()
        if password is not None:
            parameters["password"] = password
        parameters.setdefault("connect_timeout", 10)
        self._own = own_backend_pids or (lambda: set())
        self._connection = psycopg.connect(autocommit=True, application_name="caseview listener", **parameters)
        self._connection.execute(f"LISTEN {NOTIFY_CHANNEL}")

    def wait(self, timeout: float = 1.0) -> list:
        """Changes committed since the last call, waiting up to ``timeout`` seconds for the first one.

        Returns
        -------
        list of WorkspaceChange
        """
        own = self._own()
        out = []
        for notice in self._connection.notifies(timeout=timeout, stop_after=1):
            out.append(WorkspaceChange.from_payload(notice.payload, notice.pid in own))
        for notice in self._connection.notifies(timeout=0.05):  # whatever else arrived meanwhile
            out.append(WorkspaceChange.from_payload(notice.payload, notice.pid in own))
        return out

    def close(self) -> None:
        try:
            self._connection.close()
        except Exception:  # closing must never fail loudly
            pass


def backend_pid(connection) -> int:
    """The server process id of a workspace connection (to recognise one's own notifications)."""
    return int(connection.execute("SELECT pg_backend_pid()").fetchone()[0])


def visible_case_codes(connection, case_keys) -> list:
    """Case codes of ``case_keys`` that this login may see (row-level security applies), sorted."""
    keys = sorted({int(k) for k in case_keys})
    if not keys:
        return []
    marks = ",".join("?" * len(keys))
    return sorted(row[0] for row in connection.execute(f"SELECT case_code FROM cases WHERE id IN ({marks})", keys))
