"""Team membership of a PostgreSQL workspace: add, remove and list who holds which caseview role.

The jobs the ``caseview team`` commands call. The login roles themselves are made by the database
administrator; these grant and revoke caseview's own group roles (see
:mod:`caseview.storage.postgres_team`). Owner only; a SQLite workspace has no team (one person,
one file) and gets a one-line refusal.
"""

from __future__ import annotations

from caseview.errors import WorkspaceError

ROLE_SUMMARY = {
    "coordinator": "sees and records contacts for the cases of their coordinator codes only",
    "supervisor": "sees every case, records reviews, reads the audit trail",
    "analyst": "reads every case, fits and publishes model versions, changes rules",
    "auditor": "reads and verifies the audit trail only",
}


def _team_connection(ws):
    """The workspace's psycopg connection; WorkspaceError on a SQLite workspace."""
    if not getattr(ws, "is_postgres", False):
        raise WorkspaceError(f"{ws.path}: team roles need a PostgreSQL workspace (postgresql://host/dbname); "
                             "a SQLite workspace is one person's file")
    return ws.connection.raw


def add_member(ws, login: str, role: str, coordinators=()):
    """Give ``login`` the workspace's ``role`` (replacing any role it held); returns the TeamMember."""
    from caseview.storage import postgres_team

    return postgres_team.add_member(_team_connection(ws), login, role, coordinators)


def remove_member(ws, login: str):
    """Take every caseview role of this workspace from ``login``; returns the TeamMember it was."""
    from caseview.storage import postgres_team

    return postgres_team.remove_member(_team_connection(ws), login)


def list_members(ws) -> list:
    """Every member of the workspace's team (owner only)."""
    from caseview.storage import postgres_team

    return postgres_team.list_members(_team_connection(ws))
