"""``caseview copy``: a whole workspace SQLite -> PostgreSQL -> SQLite, row for row, trail verified.

Runs against a real PostgreSQL server (the session's throwaway cluster, tests/postgres_cluster.py).
"""

from __future__ import annotations

import pytest

from storage_helpers import DEMO_MODEL_PATH, ROWS, write_csv
from test_backends import cli, one_line_error

#: every table the copy must carry (the schema's tables; a new table joins this list)
TABLES = ("audit_log", "case_closures", "case_scores", "cases", "categories", "channels", "contact_provenance",
          "contact_versions", "contacts", "coordinators", "covariates", "model_versions", "reviews",
          "row_digests", "score_runs", "settings")


def full_workspace(target, tmp_path, capsys) -> None:
    """A workspace with a row in every table: import, record, correct, void, close, review, a saved score
    run, changed rules, a second model version."""
    csv_path = write_csv(tmp_path / "rows.csv", ROWS)
    steps = [("init", target, "--model", DEMO_MODEL_PATH, "--by", "ana"),
             ("import", target, csv_path, "--by", "ana"),
             ("record", target, "HS-0001", "--date", "2025-04-01", "--value", "mobility=slow", "--by", "ben"),
             ("correct", target, "HS-0001", "--date", "2025-04-01", "--value", "mobility=unable", "--reason",
              "typed the wrong category", "--by", "ben"),
             ("void", target, "HS-0002", "--date", "2025-02-10", "--reason", "wrong case", "--by", "ben"),
             ("close", target, "HS-0003", "--date", "2025-06-01", "--reason", "moved", "--by", "ben"),
             ("flags", target, "--as-of", "2025-05-01", "--save", "--by", "sue", "--out", tmp_path / "flags.csv"),
             ("review", target, "HS-0001", "--status", "acknowledged", "--note", "seen at team meeting", "--by", "sue",
              "--as-of", "2025-05-01"),
             ("rules", target, "--set", "sharp_rise.enabled=false", "--by", "sue")]
    for step in steps:
        code, out, err = cli(capsys, *step)
        assert code == 0, (step[0], err)
    from caseview.storage import Workspace

    with Workspace.open(target) as ws:
        ws.add_model_version(DEMO_MODEL_PATH.read_text(encoding="utf-8"), "second version", "ana", make_current=False)


def table_rows(target) -> dict:
    """Every row of every table, as plain Python values, sorted."""
    from caseview.storage import Workspace
    from caseview.storage.workspace_copy import _columns, _select

    out = {}
    with Workspace.open(target) as ws:
        con = ws.connection
        for table in TABLES:
            rows = con.execute(_select(con, table, _columns(con, table))).fetchall()
            out[table] = sorted((tuple(bytes(v) if isinstance(v, memoryview) else v for v in row) for row in rows),
                                key=lambda row: tuple((v is None, 0 if v is None else v) for v in row))
    return out


def test_copy_sqlite_to_postgres_and_back(tmp_path, pg_url, capsys):
    source = str(tmp_path / "source.cvw")
    full_workspace(source, tmp_path, capsys)
    before = table_rows(source)
    assert all(before[t] for t in TABLES), [t for t in TABLES if not before[t]]

    code, out, err = cli(capsys, "copy", source, pg_url)  # the server names who copied (--by refused)
    assert code == 0, err
    assert "audit trail verified at the destination" in out
    in_postgres = table_rows(pg_url)
    back = str(tmp_path / "back.cvw")
    code, out, err = cli(capsys, "copy", pg_url, back, "--by", "ana")
    assert code == 0, err
    again = table_rows(back)
    for table in TABLES:
        if table in ("audit_log", "row_digests"):
            continue
        assert in_postgres[table] == before[table], table
        assert again[table] == before[table], table
    # the trail: every source entry unchanged, then one workspace.copy entry per copy
    assert in_postgres["audit_log"][:len(before["audit_log"])] == before["audit_log"]
    assert len(in_postgres["audit_log"]) == len(before["audit_log"]) + 1
    assert again["audit_log"][:len(in_postgres["audit_log"])] == in_postgres["audit_log"]
    for target in (pg_url, back):
        code, out, err = cli(capsys, "audit", "verify", target)
        assert code == 0 and "intact" in out, err
    # the same scores from all three
    outputs = [cli(capsys, "score", t, "--as-of", "2025-06-30", "--out", "-")[1] for t in (source, pg_url, back)]
    assert outputs[0] == outputs[1] == outputs[2]


def test_copy_refuses_a_non_empty_destination(tmp_path, pg_url, capsys):
    source = str(tmp_path / "source.cvw")
    assert cli(capsys, "init", source, "--model", DEMO_MODEL_PATH)[0] == 0
    assert cli(capsys, "copy", source, pg_url)[0] == 0
    code, out, err = cli(capsys, "copy", source, pg_url)
    assert code == 2
    one_line_error(err)
    assert "already holds a caseview workspace" in err
    code, out, err = cli(capsys, "copy", pg_url, source)
    assert code == 2
    one_line_error(err)
    assert "already exists" in err


def test_failed_copy_leaves_the_destination_empty(tmp_path, pg_url, capsys, monkeypatch):
    """A copy whose trail does not verify at the destination keeps nothing."""
    from caseview.storage import audit
    from caseview.storage.audit import AuditVerification
    from caseview.storage.location import workspace_location

    source = str(tmp_path / "source.cvw")
    assert cli(capsys, "init", source, "--model", DEMO_MODEL_PATH)[0] == 0
    monkeypatch.setattr(audit, "verify", lambda con, rows=True: AuditVerification(False, 1, 1, "entry 1 altered", ""))
    for destination in (pg_url, str(tmp_path / "copy.cvw")):
        code, out, err = cli(capsys, "copy", source, destination)
        assert code == 2
        one_line_error(err)
        assert "does not verify" in err
    assert not (tmp_path / "copy.cvw").exists()
    from caseview.storage import pg_backend
    from caseview.storage.workspace import Workspace

    ws = Workspace(workspace_location(pg_url))
    try:
        pg_backend.refuse_unless_empty(ws.connection, ws.path)  # still empty
    finally:
        ws.close()


def test_backup_of_a_postgres_workspace_is_a_verified_sqlite_file(tmp_path, pg_url, capsys):
    assert cli(capsys, "init", pg_url, "--model", DEMO_MODEL_PATH)[0] == 0
    assert cli(capsys, "import", pg_url, write_csv(tmp_path / "rows.csv", ROWS))[0] == 0
    code, out, err = cli(capsys, "backup", pg_url, tmp_path / "backup.cvw")  # --by is refused on PostgreSQL
    assert code == 0, err
    code, out, err = cli(capsys, "check", tmp_path / "backup.cvw")
    assert code == 0 and "workspace OK" in out, out + err
    from caseview.storage import Workspace

    with Workspace.open(pg_url) as ws:
        assert ws.audit_entries()[-1].action == "workspace.backup"
        assert ws.audit_verify().ok
