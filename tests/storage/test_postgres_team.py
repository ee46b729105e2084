"""Team roles on a real PostgreSQL server: the server, not caseview, decides who reads and writes what.

Each check connects as a login of one role (a password, as every login but the superuser needs on
the test cluster) and tries what that role must and must not do, through caseview and with plain
SQL typed by hand.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import subprocess
import sys

import psycopg
import pytest

from caseview.errors import InputError, WorkspaceError
from caseview.followup import record_review
from caseview.operations import casework
from caseview.storage.audit import entry_hash
from team_workspace import PASSWORD, make_team_workspace

PEOPLE = {"alice": ("coordinator", ["C1"]), "bob": ("coordinator", ["C2", "C3"]), "sam": ("supervisor", []),
          "ann": ("analyst", []), "aud": ("auditor", [])}
AS_OF = dt.date(2026, 11, 30)
COVARIATES = {"lives_alone": 1, "balance_programme": 0}


@pytest.fixture(scope="module")
def team(postgres_cluster, tmp_path_factory):
    return make_team_workspace(postgres_cluster, tmp_path_factory.mktemp("team"), PEOPLE)


def test_a_coordinator_sees_only_the_cases_of_their_coordinator_codes(team):
    c1, c2 = team.cases_by_coordinator["C1"], team.cases_by_coordinator["C2"]
    with team.open(team.login("alice")) as ws:
        assert ws.case_count() == len(c1)
        assert sorted(ws.stored_contacts().case_codes.tolist()) == c1
        with pytest.raises(InputError, match=f"no case '{c2[0]}'"):
            ws.find_case(c2[0])
    with team.raw(team.login("alice")) as con:  # plain SQL: row-level security, not caseview, filters
        assert con.execute("SELECT count(*) FROM cases WHERE coordinator = 'C2'").fetchone()[0] == 0
        assert con.execute("SELECT count(DISTINCT case_id) FROM contacts").fetchone()[0] == len(c1)
    with team.open(team.login("bob")) as ws:
        assert ws.case_count() == len(team.cases_by_coordinator["C2"]) + len(team.cases_by_coordinator["C3"])


def test_nobody_updates_or_deletes_audit_entries_with_plain_sql(team):
    for login in (team.login("alice"), team.login("sam"), team.owner):
        with team.raw(login) as con:
            for statement in ("UPDATE audit_log SET actor = 'someone else'", "DELETE FROM audit_log",
                              "TRUNCATE audit_log",
                              "INSERT INTO audit_log VALUES (999, '', 'forged', '', '', '{}', '', '')"):
                with pytest.raises(psycopg.errors.InsufficientPrivilege):
                    con.execute(statement)
    with team.raw(team.login("alice")) as con:  # nor spoil the verification of other coordinators' cases
        others = team.cases_by_coordinator["C2"]
        spoiled = con.execute("UPDATE row_digests SET digest = repeat('0', 64) WHERE set_name = 'cases' AND key = ANY(%s)",
                              (others,))
        assert spoiled.rowcount == 0
        assert con.execute("SELECT count(*) FROM row_digests WHERE set_name = 'cases'").fetchone()[0] == \
            len(team.cases_by_coordinator["C1"])
    with team.raw(team.login("alice")) as con:  # a coordinator does not even read the trail (other cases' details)
        with pytest.raises(psycopg.errors.InsufficientPrivilege):
            con.execute("SELECT count(*) FROM audit_log")


def test_a_coordinator_cannot_record_a_review_or_change_rules_or_fit(team):
    case = team.cases_by_coordinator["C1"][0]
    with team.open(team.login("alice")) as ws:
        before = ws.audit_head()
        with pytest.raises(WorkspaceError, match="permission denied"):
            record_review(ws, case, "acknowledged", "seen", "alice", None, AS_OF)
        with pytest.raises(WorkspaceError, match="permission denied"):
            ws.set_setting("rules", {"anything": 1}, "alice")
        with pytest.raises(WorkspaceError, match="permission denied"):
            ws.add_model_version(ws.model_versions()[0].json_text, "refit", "alice")
    with team.open(team.owner) as ws:
        assert ws.audit_head() == before  # nothing was stored


def test_an_auditor_reads_and_verifies_the_trail_but_no_case(team):
    with team.raw(team.login("aud")) as con:
        for table in ("cases", "contacts", "reviews", "contact_versions", "model_versions"):
            with pytest.raises(psycopg.errors.InsufficientPrivilege):
                con.execute(f"SELECT count(*) FROM {table}")
        assert con.execute("SELECT count(*) FROM audit_log").fetchone()[0] > 0
    with team.open(team.login("aud")) as ws:
        result = ws.audit_verify()
        assert result.ok and result.n_entries > 0 and not result.rows_checked
    verify = subprocess.run([sys.executable, "-m", "caseview", "audit", "verify", team.url(team.login("aud"))],
                            capture_output=True, text=True, env=team.env(), timeout=120)
    assert verify.returncode == 0, verify.stderr
    assert "audit trail intact" in verify.stdout and "records not checked: your role reads the audit trail only" \
        in verify.stdout


def test_every_entry_and_who_column_names_the_login_the_server_authenticated(team):
    alice, case = team.login("alice"), "HS-9001"
    with team.open(alice) as ws:  # a new person: the case key comes from the server (alice sees only C1's cases)
        result = casework.record_contact(ws, case, "2026-11-20", "not-alice-at-all", values={"mobility": "slow"},
                                         covariates=COVARIATES, coordinator="C1", new_case=True)
        assert result.case_id == case
    with team.open(team.login("bob")) as ws:
        with pytest.raises(InputError):  # another coordinator's case does not exist for bob
            casework.record_contact(ws, case, "2026-11-21", "bob", values={"mobility": "slow"}, new_case=False)
        with pytest.raises(InputError, match="already exists and is not among the cases you can see"):
            casework.record_contact(ws, case, "2026-11-21", "bob", values={"mobility": "slow"}, coordinator="C2",
                                    covariates=COVARIATES, new_case=True)
    with team.open(team.login("sam")) as ws:
        entry = [e for e in ws.audit_entries(case_id=case) if e.action == "contact.record"][-1]
        assert entry.actor == alice
        assert ws.connection.execute("SELECT recorded_by FROM contact_provenance p JOIN cases c ON c.id = p.case_id "
                                     "WHERE c.case_code = ?", (case,)).fetchone()[0] == alice
        back_dated = ws.audit_append("not-sam", "note.test", case, {}, at_utc="2001-01-01T00:00:00.000000Z")
        stamped = dt.datetime.strptime(back_dated.at_utc, "%Y-%m-%dT%H:%M:%S.%fZ").replace(tzinfo=dt.timezone.utc)
        assert back_dated.actor == team.login("sam")  # the server's identity and clock, not the client's
        assert abs((stamped - dt.datetime.now(dt.timezone.utc)).total_seconds()) < 300
        row = record_review(ws, case, "acknowledged", "seen", "not-sam", None, AS_OF)
        assert row.actor == team.login("sam")
        assert ws.audit_entries(case_id=case)[-1].actor == team.login("sam")
        assert ws.audit_verify().ok


def test_the_servers_entry_hash_is_the_python_one_for_awkward_text(team):
    """Every character class JSON escapes differently: quotes, backslash, control characters, non-ASCII."""
    awkward = ["plain", 'say "no"', "back\\slash", "tab\there", "line\nbreak", "\x00\x01\x1f\x7f", "é ß 中文 🙂",
               "\u2028\u2029", "</script>"]
    with team.raw(team.owner) as con:
        for text in awkward:
            details = json.dumps({"note": text}, ensure_ascii=False)  # NUL is written \u0000: storable text
            row = con.execute("SELECT * FROM caseview_audit_append(%s, %s, %s, NULL)",
                              (f"test.{len(text)}", text.replace("\x00", ""), details)).fetchone()
            stored = con.execute("SELECT id, at_utc, actor, action, target, details_json, prev_hash, entry_hash "
                                 "FROM audit_log WHERE id = %s", (row[0],)).fetchone()
            assert entry_hash(*stored[:7]) == stored[7] == row[4]


def test_team_commands_owner_only_and_postgresql_only(team, tmp_path):
    def run(*args):
        return subprocess.run([sys.executable, "-m", "caseview", "team", *args], capture_output=True, text=True,
                              env=team.env(), timeout=120)

    owner_url = team.url(team.owner)
    listed = run("list", owner_url)
    assert listed.returncode == 0, listed.stderr
    assert f"{team.login('alice')}: coordinator (coordinators C1)" in listed.stdout
    assert f"{team.login('bob')}: coordinator (coordinators C2, C3)" in listed.stdout
    refused = run("list", team.url(team.login("sam")))
    assert refused.returncode != 0 and refused.stderr.count("\n") == 1
    assert f"only the workspace owner ({team.owner}) can change or list the team" in refused.stderr
    missing = run("add", owner_url, "nobody_here", "--role", "analyst")
    assert "no login role 'nobody_here' on this server" in missing.stderr and missing.stderr.count("\n") == 1
    no_code = run("add", owner_url, team.login("ann"), "--role", "coordinator")
    assert "a coordinator needs at least one coordinator code" in no_code.stderr
    sqlite = run("list", str(tmp_path / "one.cvw"))
    assert sqlite.returncode != 0
    by = subprocess.run([sys.executable, "-m", "caseview", "record", team.url(team.login("alice")),
                         team.cases_by_coordinator["C1"][0], "--date", "2026-11-25", "--by", "someone"],
                        capture_output=True, text=True, env=team.env(), timeout=120)
    assert by.returncode != 0 and "--by is not accepted on a PostgreSQL workspace" in by.stderr


def test_team_add_replaces_a_role_and_remove_takes_it_away(team):
    ann = team.login("ann")
    with team.open(team.owner) as ws:
        from caseview.operations import team as team_jobs

        member = team_jobs.add_member(ws, ann, "coordinator", ["C4"])
        assert (member.role, member.coordinators) == ("coordinator", ("C4",))
    with team.open(ann) as ws:
        assert ws.case_count() == len(team.cases_by_coordinator["C4"])
    with team.open(team.owner) as ws:
        team_jobs.remove_member(ws, ann)
        assert ann not in [m.login for m in team_jobs.list_members(ws)]
    with team.raw(ann) as con:
        with pytest.raises(psycopg.errors.InsufficientPrivilege):
            con.execute("SELECT count(*) FROM cases")
    with team.open(team.owner) as ws:
        team_jobs.add_member(ws, ann, "analyst")
        entries = [e.action for e in ws.audit_entries() if e.target == f"login:{ann}"]
        assert entries[-3:] == ["team.add", "team.remove", "team.add"]
        assert ws.audit_verify().ok


def test_team_commands_refuse_a_sqlite_workspace(tmp_path):
    from caseview.operations import team as team_jobs
    from caseview.storage import Workspace
    from team_workspace import DEMO_MODEL

    with Workspace.create(tmp_path / "solo.cvw", DEMO_MODEL.read_text(encoding="utf-8"), "me") as ws:
        with pytest.raises(WorkspaceError, match="team roles need a PostgreSQL workspace"):
            team_jobs.list_members(ws)


def test_a_copy_into_a_team_database_keeps_its_trail_and_gets_the_roles(postgres_cluster, tmp_path):
    """An owner without superuser rights copies a SQLite workspace in: the trail arrives whole through the
    owner-only restore (which refuses a trail in use), the team roles then apply."""
    from psycopg import sql

    from caseview.operations import team as team_jobs
    from caseview.operations.workspace_copy import copy_workspace
    from caseview.storage import Workspace
    from caseview.timeline_io import import_timelines
    from team_workspace import DEMO_MODEL, small_caseload_csv

    owner, coordinator = f"copier_{tmp_path.name[-12:]}".lower(), f"cody_{tmp_path.name[-12:]}".lower()
    for name in (owner, coordinator):
        postgres_cluster.create_role(name, PASSWORD)
    with postgres_cluster.admin() as con:
        con.execute(sql.SQL("ALTER ROLE {} CREATEROLE").format(sql.Identifier(owner)))
    dbname = f"copy_{tmp_path.name[-12:]}".lower()
    postgres_cluster.create_database(dbname, owner=owner)
    source = tmp_path / "solo.cvw"
    codes = small_caseload_csv(tmp_path / "few.csv", 2)
    with Workspace.create(source, DEMO_MODEL.read_text(encoding="utf-8"), "kim") as ws:
        import_timelines(ws, tmp_path / "few.csv", "kim")
        record_review(ws, codes["C1"][0], "acknowledged", "seen", "kim", None, AS_OF)
    url = postgres_cluster.url(dbname, owner)
    result = copy_workspace(source, url, "ignored", destination_password=PASSWORD)
    assert result.n_entries >= 4
    with Workspace.open(url, password=PASSWORD) as ws:
        entries = ws.audit_entries()
        assert [e.actor for e in entries[:-1]] == ["kim"] * (len(entries) - 1)  # as recorded in the file
        assert entries[-1].actor == owner and entries[-1].action == "workspace.copy"
        assert ws.connection.execute("SELECT actor FROM reviews").fetchone()[0] == "kim"
        assert ws.audit_verify().ok
        with pytest.raises(WorkspaceError, match="only into a new, empty workspace"), ws.transaction() as con:
            con.execute("SELECT caseview_audit_restore(?::json)", ('[{"id": 99}]',))
        team_jobs.add_member(ws, coordinator, "coordinator", ["C2"])
    with Workspace.open(postgres_cluster.url(dbname, coordinator), password=PASSWORD) as ws:
        assert ws.stored_contacts().case_codes.tolist() == codes["C2"]


def test_analysts_change_rules_and_publish_models_supervisors_and_auditors_do_not(team):
    from caseview.followup.rules import default_rules, save_workspace_rules, workspace_rules

    from caseview.operations import team as team_jobs

    with team.open(team.owner) as ws:
        team_jobs.add_member(ws, team.login("ann"), "analyst")  # whatever an earlier test left
    with team.open(team.login("ann")) as ws:
        save_workspace_rules(ws, default_rules(), "ignored")
        version = ws.add_model_version(ws.model_versions()[0].json_text, "published", "ignored", make_current=False)
        assert version > 1
    with team.open(team.login("sam")) as ws:
        assert workspace_rules(ws) is not None  # reads them
        with pytest.raises(WorkspaceError, match="the server refused: permission denied for table settings"):
            save_workspace_rules(ws, default_rules(), "sam")
        with pytest.raises(WorkspaceError, match="permission denied"):
            ws.add_model_version(ws.model_versions()[0].json_text, "refit", "sam")
    with team.open(team.login("aud")) as ws:
        with pytest.raises(WorkspaceError, match="permission denied"):
            workspace_rules(ws)


def test_init_by_a_login_that_cannot_create_roles_says_what_to_ask_for(postgres_cluster, tmp_path):
    name = f"plain_{tmp_path.name[-12:]}".lower()
    postgres_cluster.create_role(name, PASSWORD)
    postgres_cluster.create_database(name, owner=name)
    from team_workspace import DEMO_MODEL

    done = subprocess.run([sys.executable, "-m", "caseview", "init", postgres_cluster.url(name, name), "--model",
                           str(DEMO_MODEL)], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PGPASSWORD": PASSWORD})
    assert done.returncode != 0 and done.stderr.count("\n") == 1
    assert f"ask the database administrator for ALTER ROLE {name} CREATEROLE (nothing was changed)" in done.stderr
    with psycopg.connect(dbname=name, host=str(postgres_cluster.socket_dir), user=name, password=PASSWORD) as con:
        assert con.execute("SELECT count(*) FROM pg_tables WHERE schemaname = 'public'").fetchone()[0] == 0
