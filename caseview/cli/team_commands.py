"""``caseview team add|remove|list``: who may do what in a PostgreSQL team workspace (owner only)."""

from __future__ import annotations

import sys

ROLES = ("coordinator", "supervisor", "analyst", "auditor")


def register(sub) -> None:
    p = sub.add_parser("team", help="grant or revoke the team roles of a PostgreSQL workspace (owner only)",
                       description="Give existing database logins a caseview role in a PostgreSQL workspace; the "
                                   "server enforces it (grants and row-level security). The database administrator "
                                   "creates the logins first. Roles: coordinator (their coordinator codes' cases "
                                   "only), supervisor (every case, reviews, audit trail), analyst (every case, fits, "
                                   "rules), auditor (the audit trail only).")
    team_sub = p.add_subparsers(dest="team_command", metavar="add|remove|list", parser_class=type(p))
    a = team_sub.add_parser("add", help="give a login a role (replaces its earlier role)")
    a.add_argument("workspace", metavar="URL")
    a.add_argument("login", metavar="LOGIN")
    a.add_argument("--role", required=True, choices=ROLES)
    a.add_argument("--coordinator", action="append", default=[], metavar="CODE",
                   help="a coordinator code whose cases this coordinator sees (repeat for several)")
    a.set_defaults(run=run_add)
    r = team_sub.add_parser("remove", help="take a login's role away")
    r.add_argument("workspace", metavar="URL")
    r.add_argument("login", metavar="LOGIN")
    r.set_defaults(run=run_remove)
    s = team_sub.add_parser("list", help="list the team")
    s.add_argument("workspace", metavar="URL")
    s.set_defaults(run=run_list)


def _describe(member) -> str:
    codes = f" (coordinators {', '.join(member.coordinators)})" if member.coordinators else ""
    return f"{member.login}: {member.role}{codes}"


def run_add(args) -> int:
    from caseview.cli.basic import open_workspace
    from caseview.operations import team

    with open_workspace(args.workspace) as ws:
        member = team.add_member(ws, args.login, args.role, args.coordinator)
    print(f"added {_describe(member)} - {team.ROLE_SUMMARY[member.role]}")
    return 0


def run_remove(args) -> int:
    from caseview.cli.basic import open_workspace
    from caseview.operations import team

    with open_workspace(args.workspace) as ws:
        member = team.remove_member(ws, args.login)
    print(f"removed {_describe(member)}")
    return 0


def run_list(args) -> int:
    from caseview.cli.basic import open_workspace
    from caseview.operations import team
    from caseview.textfiles import printable

    with open_workspace(args.workspace) as ws:
        members = team.list_members(ws)
    if not members:
        print("no team members yet (add them with 'caseview team add URL LOGIN --role ROLE')", file=sys.stderr)
    for member in members:
        print(printable(f"{_describe(member)}; added {member.added_utc} by {member.added_by}"))
    return 0
