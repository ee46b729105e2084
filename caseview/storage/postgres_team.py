"""Team membership of a PostgreSQL workspace: which login holds which caseview role.

The database administrator makes the login roles (``CREATE ROLE alice LOGIN ...``); the workspace
owner then grants and revokes only caseview's own group roles (:func:`.postgres_roles.group_roles`)
and keeps the login -> coordinator codes mapping that the coordinators' row-level security reads.
Every change is audited in the same transaction (actor: the server's ``session_user``).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import InputError, WorkspaceError
from . import audit as _audit
from .postgres_roles import TEAM_ROLES, _sql, group_roles


@dataclass(frozen=True)
class TeamMember:
    """One login's caseview role; ``coordinators`` are the codes whose cases a coordinator sees."""

    login: str
    role: str
    coordinators: tuple
    added_utc: str
    added_by: str


def _owner_only(cur, what: str) -> str:
    """The database name; WorkspaceError unless the connected login owns the workspace tables."""
    cur.execute("SELECT current_database(), session_user, (SELECT pg_get_userbyid(relowner) FROM pg_class"
                " WHERE oid = to_regclass('public.cases'))")
    database, login, owner = cur.fetchone()
    if owner is None:
        raise WorkspaceError(f"{database}: not a caseview workspace (no cases table)")
    if login != owner:
        raise WorkspaceError(f"team {what}: only the workspace owner ({owner}) can change or list the team; "
                             f"you are connected as {login}")
    return database


def _check_login(cur, login: str) -> None:
    cur.execute("SELECT rolcanlogin FROM pg_roles WHERE rolname = %s", (login,))
    row = cur.fetchone()
    if row is None:
        raise InputError(f"no login role {login!r} on this server; the database administrator creates it first "
                         f"(CREATE ROLE {login} LOGIN ...); nothing was changed")
    if not row[0]:
        raise InputError(f"{login!r} is a group role, not a login; give a login role (nothing was changed)")


def add_member(connection, login: str, role: str, coordinators=()) -> TeamMember:
    """Grant ``login`` the workspace's ``role`` group (one role per login; a second ``add`` replaces it).

    Parameters
    ----------
    connection : psycopg.Connection
        The owner's connection; the change and its audit entry commit together.
    login : str
        An existing login role.
    role : {"coordinator", "supervisor", "analyst", "auditor"}
    coordinators : iterable of str
        Coordinator codes whose cases a coordinator sees (required for, and only for, coordinators).
    """
    if role not in TEAM_ROLES:
        raise InputError(f"role {role!r}: expected one of {', '.join(TEAM_ROLES)}")
    codes = tuple(dict.fromkeys(str(c).strip() for c in coordinators if str(c).strip()))
    if role == "coordinator" and not codes:
        raise InputError(f"team add {login}: a coordinator needs at least one coordinator code (nothing was changed)")
    if role != "coordinator" and codes:
        raise InputError(f"team add {login}: coordinator codes apply to the coordinator role only (nothing was changed)")
    with connection.transaction():
        cur = connection.cursor()
        database = _owner_only(cur, "add")
        _check_login(cur, login)
        cur.execute("SELECT session_user")
        if cur.fetchone()[0] == login:
            raise InputError(f"team add {login}: that is the owner's own login; use another login for day-to-day "
                             "work (nothing was changed)")
        roles = group_roles(database)
        previous = _revoke_all(cur, roles, login)
        cur.execute(_sql("GRANT {g} TO {u}", g=roles[role], u=login))
        at = _audit.utc_now()
        cur.execute("INSERT INTO team_members (login, role, added_utc, added_by) VALUES (%s, %s, %s, session_user)",
                    (login, role, at))
        cur.executemany("INSERT INTO team_coordinators (login, coordinator) VALUES (%s, %s)",
                        [(login, code) for code in codes])
        _audit_team(cur, "team.add", login, {"login": login, "role": role, "coordinators": list(codes),
                                             "previous_role": previous})
    return next(m for m in list_members(connection) if m.login == login)


def remove_member(connection, login: str) -> TeamMember:
    """Revoke every caseview group role of ``login`` in this workspace; returns what it held."""
    with connection.transaction():
        cur = connection.cursor()
        database = _owner_only(cur, "remove")
        members = {m.login: m for m in _members(cur)}
        if login not in members:
            known = ", ".join(sorted(members)) or "none"
            raise InputError(f"team remove: {login!r} is not in this workspace's team (members: {known}); "
                             "nothing was changed")
        _revoke_all(cur, group_roles(database), login)
        member = members[login]
        _audit_team(cur, "team.remove", login, {"login": login, "role": member.role,
                                                "coordinators": list(member.coordinators)})
    return member


def list_members(connection) -> list:
    """Every team member, by login (owner only)."""
    cur = connection.cursor()
    _owner_only(cur, "list")
    return _members(cur)


def _members(cur) -> list:
    cur.execute("SELECT m.login, m.role, m.added_utc, m.added_by, COALESCE(array_agg(c.coordinator ORDER BY"
                " c.coordinator) FILTER (WHERE c.coordinator IS NOT NULL), '{}') FROM team_members m"
                " LEFT JOIN team_coordinators c ON c.login = m.login GROUP BY m.login ORDER BY m.login")
    return [TeamMember(login, role, tuple(codes), added, by) for login, role, added, by, codes in cur.fetchall()]


def _revoke_all(cur, roles: dict, login: str) -> str | None:
    """Revoke the team group roles from ``login`` and forget its mapping; returns its former role."""
    cur.execute("SELECT role FROM team_members WHERE login = %s", (login,))
    row = cur.fetchone()
    for role in TEAM_ROLES:
        cur.execute("SELECT 1 FROM pg_auth_members m JOIN pg_roles g ON g.oid = m.roleid JOIN pg_roles u"
                    " ON u.oid = m.member WHERE g.rolname = %s AND u.rolname = %s", (roles[role], login))
        if cur.fetchone():
            cur.execute(_sql("REVOKE {g} FROM {u}", g=roles[role], u=login))
    cur.execute("DELETE FROM team_members WHERE login = %s", (login,))
    return row[0] if row else None


def _audit_team(cur, action: str, login: str, details: dict) -> None:
    cur.execute("SELECT * FROM caseview_audit_append(%s, %s, %s, NULL)",
                (action, f"login:{login}", _audit.canonical_json(details)))
