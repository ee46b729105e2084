"""``caseview history`` on a PostgreSQL workspace: one connection, a handful of round trips, that case only
(issue 19 items 4 and 5; the SQLite counterpart is tests/app/test_history_one_case.py).

Every statement the command sends goes through psycopg's ``Cursor.execute`` / ``executemany`` / ``copy``
(``Connection.execute`` opens a cursor and calls ``Cursor.execute``), so wrapping those three counts every
round trip after the connection is made; ``psycopg.connect`` counts the connections.
"""

from __future__ import annotations

import re

import pytest

#: Statements a one-case history may send after connecting: the session settings (one text of SETs), the
#: workspace identity and schema version, the case-ID lookup, the current model, the channel/category
#: registry, the covariate names, the case's contacts. (Before: 13, the registry one statement per channel
#: and the identity after a catalogue listing.)
MAX_STATEMENTS = 7


@pytest.fixture(scope="module")
def demo_url(postgres_cluster):
    from caseview.cli.basic import create_demo_workspace

    url = postgres_cluster.create_database()
    create_demo_workspace(url, "tester")
    return url


@pytest.fixture
def sent(monkeypatch):
    """Every statement sent to the server (text, parameters) and the number of connections made."""
    import psycopg

    seen = {"statements": [], "connections": 0}
    execute, executemany, copy = psycopg.Cursor.execute, psycopg.Cursor.executemany, psycopg.Cursor.copy
    connect = psycopg.connect

    def traced_execute(self, query, params=None, **kwargs):
        seen["statements"].append((str(query), tuple(params or ())))
        return execute(self, query, params, **kwargs)

    def traced_executemany(self, query, params_seq, **kwargs):
        seen["statements"].append((str(query), ("many",)))
        return executemany(self, query, params_seq, **kwargs)

    def traced_copy(self, statement, params=None, **kwargs):
        seen["statements"].append((str(statement), tuple(params or ())))
        return copy(self, statement, params, **kwargs)

    def traced_connect(*args, **kwargs):
        seen["connections"] += 1
        return connect(*args, **kwargs)

    monkeypatch.setattr(psycopg.Cursor, "execute", traced_execute)
    monkeypatch.setattr(psycopg.Cursor, "executemany", traced_executemany)
    monkeypatch.setattr(psycopg.Cursor, "copy", traced_copy)
    monkeypatch.setattr(psycopg, "connect", traced_connect)
    return seen


def test_history_on_postgres_is_one_connection_and_few_round_trips(demo_url, sent, tmp_path, monkeypatch):
    from caseview.cli.main import main
    from caseview.storage import case_packs, contacts

    def refuse(*args, **kwargs):
        raise AssertionError("history read the whole caseload")

    monkeypatch.setattr(contacts, "fetch_contacts", refuse)
    monkeypatch.setattr(case_packs, "read_case_packs", refuse)
    out = tmp_path / "h.csv"
    assert main(["history", demo_url, "HS-0002", "--out", str(out)]) == 0
    statements = sent["statements"]
    assert sent["connections"] == 1
    assert len(statements) <= MAX_STATEMENTS, "\n".join(s for s, _ in statements)
    assert not [s for s, _ in statements if re.search(r"\bFROM cases\b(?!.*\bWHERE\b)", s)], "every case was read"
    reads = [(s, p) for s, p in statements if re.search(r"\bFROM (contacts|case_packs)\b", s)]
    assert reads, "the case's contacts were read"
    for statement, params in reads:  # each read of contacts is bound to that one case
        assert "WHERE k.case_code = %s" in statement and params[0] == "HS-0002", (statement, params)
    lines = out.read_text(encoding="utf-8").splitlines()
    assert all(line.startswith("HS-0002,") for line in lines[1:]) and len(lines) > 2


def test_the_one_case_read_goes_through_an_index(demo_url, sent, tmp_path):
    """With sequential scans priced out (PostgreSQL documentation, "Planner Method Configuration",
    enable_seqscan), a read still planned as "Seq Scan on contacts" would have no index to use."""
    import psycopg

    from caseview.cli.main import main

    assert main(["history", demo_url, "HS-0002", "--out", str(tmp_path / "h.csv")]) == 0
    reads = [(s, p) for s, p in sent["statements"] if re.search(r"\bFROM contacts\b", s)]
    assert reads
    from caseview.storage.location import parse_database_url

    with psycopg.connect(**parse_database_url(demo_url).connection_parameters()) as con:
        con.execute("SET enable_seqscan = off")
        for statement, params in reads:
            plan = " / ".join(row[0] for row in con.execute("EXPLAIN " + statement, params))
            assert "Seq Scan on contacts" not in plan, plan


def test_session_settings_are_one_round_trip_and_hold(demo_url, sent):
    """UTC, the lock timeout and read-only are sent together (one simple query) and hold on the session."""
    from caseview.storage import Workspace

    with Workspace.open(demo_url, busy_timeout_ms=1234, read_only=True) as ws:
        settings = [s for s, _ in sent["statements"] if s.upper().startswith("SET ")]
        assert len(settings) == 1 and settings[0].count("SET ") == 3, settings
        zone, timeout, read_only = ws.connection.execute(
            "SELECT current_setting('TimeZone'), current_setting('lock_timeout'), "
            "current_setting('default_transaction_read_only')").fetchone()
    assert (zone, timeout, read_only) == ("UTC", "1234ms", "on")


def test_opening_an_empty_or_foreign_database_still_says_which(postgres_cluster):
    """The identity row is read first; the catalogue is looked at only to explain a database without it."""
    import psycopg

    from caseview.errors import WorkspaceError
    from caseview.storage import Workspace
    from caseview.storage.location import parse_database_url

    empty = postgres_cluster.create_database()
    with pytest.raises(WorkspaceError, match="the database is empty, not a caseview workspace yet"):
        Workspace.open(empty)
    with psycopg.connect(**parse_database_url(empty).connection_parameters(), autocommit=True) as con:
        con.execute("CREATE TABLE payroll (id int)")
    with pytest.raises(WorkspaceError, match="not a caseview workspace \\(the database holds other tables\\)"):
        Workspace.open(empty)
