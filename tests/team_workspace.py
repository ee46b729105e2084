"""A PostgreSQL team workspace for tests: an owner login, logins for each role, a small caseload.

Built on the session's throwaway cluster (``postgres_cluster`` fixture, tests/conftest.py). Roles
are cluster-wide, so every name carries a tag unique to the workspace. Every login has a password
(the cluster's pg_hba.conf asks every role but the superuser for one).
"""

from __future__ import annotations

import csv
import itertools
import os
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO_CSV = ROOT / "demo_cases" / "home_support_demo.csv"
DEMO_MODEL = ROOT / "resources" / "models" / "home_support_demo.json"
PASSWORD = "invented-test-password"
_COUNTER = itertools.count(1)


@dataclass
class TeamWorkspace:
    """Where the workspace is and who is in its team: ``logins[name] = (role, coordinator codes)``."""

    cluster: object
    dbname: str
    owner: str
    logins: dict = field(default_factory=dict)
    cases_by_coordinator: dict = field(default_factory=dict)

    def url(self, login: str) -> str:
        return self.cluster.url(self.dbname, login)

    def open(self, login: str):
        from caseview.storage import Workspace

        return Workspace.open(self.url(login), password=PASSWORD)

    def raw(self, login: str):
        """A plain psycopg connection as ``login`` (autocommit), for SQL typed by hand."""
        import psycopg

        return psycopg.connect(dbname=self.dbname, host=str(self.cluster.socket_dir), user=login, password=PASSWORD,
                               autocommit=True)

    def login(self, name: str) -> str:
        """The login of the person called ``name`` in this workspace (``alice`` -> ``alice_t12_3``)."""
        return f"{name}_{self.dbname.split('_', 1)[1]}"

    def env(self) -> dict:
        return {**os.environ, "PGPASSWORD": PASSWORD}


def small_caseload_csv(path: Path, cases_per_coordinator: int = 5) -> dict:
    """The first cases of each coordinator of the invented demo caseload; returns coordinator -> case codes."""
    with open(DEMO_CSV, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    header, body = rows[0], rows[1:]
    chosen: dict = {}
    for row in body:
        chosen.setdefault(row[2], [])
        if row[0] not in chosen[row[2]] and len(chosen[row[2]]) < cases_per_coordinator:
            chosen[row[2]].append(row[0])
    keep = {code for codes in chosen.values() for code in codes}
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        writer.writerows(row for row in body if row[0] in keep)
    return {coordinator: sorted(codes) for coordinator, codes in chosen.items()}


def make_team_workspace(cluster, folder: Path, people: dict) -> TeamWorkspace:
    """Create the owner, the database, the workspace (with a small caseload) and the team.

    ``people``: name -> (role, [coordinator codes]); each gets a login ``name_<tag>``.
    """
    from psycopg import sql

    from caseview.operations import team
    from caseview.storage import Workspace
    from caseview.timeline_io import import_timelines

    tag = f"t{os.getpid()}_{next(_COUNTER)}"
    owner = f"owner_{tag}"
    cluster.create_role(owner, PASSWORD)
    with cluster.admin() as con:
        con.execute(sql.SQL("ALTER ROLE {} CREATEROLE").format(sql.Identifier(owner)))
    for name in people:
        cluster.create_role(f"{name}_{tag}", PASSWORD)
    dbname = f"team_{tag}"
    cluster.create_database(dbname, owner=owner)
    result = TeamWorkspace(cluster, dbname, owner)
    data = folder / f"{tag}.csv"
    result.cases_by_coordinator = small_caseload_csv(data)
    with Workspace.create(result.url(owner), DEMO_MODEL.read_text(encoding="utf-8"), "ignored",
                          password=PASSWORD) as ws:
        import_timelines(ws, data, "ignored")
        for name, (role, codes) in people.items():
            team.add_member(ws, f"{name}_{tag}", role, codes)
            result.logins[f"{name}_{tag}"] = (role, tuple(codes))
    return result
