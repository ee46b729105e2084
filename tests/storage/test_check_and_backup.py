"""``caseview check``, ``audit verify --head``, entry hashes in ``audit show``, and backups recorded only when
complete and verified (issue 12, items 2, 7 and 10)."""

from __future__ import annotations

import sqlite3

import pytest

from caseview.cli.main import main
from caseview.errors import WorkspaceError
from caseview.storage import Workspace
from caseview.timeline_io import import_timelines


@pytest.fixture
def filled_path(ws, small_csv):
    import_timelines(ws, small_csv, "tester")
    path = ws.path
    ws.close()
    return path


def test_check_reports_ok(filled_path, capsys):
    assert main(["check", str(filled_path)]) == 0
    out = capsys.readouterr().out
    assert "integrity check (SQLite): ok" in out and "audit chain: intact" in out
    assert "all match the audit trail" in out and out.strip().endswith("workspace OK")


def test_check_finds_a_forged_row_and_a_broken_chain(filled_path, capsys):
    con = sqlite3.connect(filled_path)
    con.execute("UPDATE contacts SET stage_known = 'Crisis' WHERE day = "
                "(SELECT MIN(day) FROM contacts)")
    con.commit()
    con.close()
    assert main(["check", str(filled_path)]) == 4
    out = capsys.readouterr().out
    assert "PROBLEM: records do not match the audit trail: case HS-0003" in out
    con = sqlite3.connect(filled_path)
    con.execute("DROP TRIGGER audit_log_no_update")
    con.execute("UPDATE audit_log SET actor = 'someone else' WHERE id = 2")
    con.commit()
    con.close()
    assert main(["check", str(filled_path)]) == 4
    assert "PROBLEM: audit trail broken at entry 2" in capsys.readouterr().out


def test_check_reports_a_damaged_file(filled_path, capsys):
    con = sqlite3.connect(filled_path)
    page_size = con.execute("PRAGMA page_size").fetchone()[0]
    root = con.execute("SELECT rootpage FROM sqlite_master WHERE name = 'audit_log'").fetchone()[0]
    con.close()
    with open(filled_path, "r+b") as fh:  # no connection is open: safe to write the file directly
        fh.seek((root - 1) * page_size + 8)
        fh.write(b"\x7f" * 200)
    code = main(["check", str(filled_path)])
    out, err = capsys.readouterr()
    assert code != 0 and "Traceback" not in err
    assert "integrity check (SQLite): FAILED" in out or "error" in err


def test_verify_head_kept_elsewhere(filled_path, capsys):
    assert main(["audit", "show", str(filled_path)]) == 0
    shown = capsys.readouterr().out.splitlines()
    hashes = [line.split("\t")[1] for line in shown[:-1]]
    assert all(len(h) == 64 for h in hashes) and shown[-1].endswith(hashes[-1])
    assert main(["audit", "verify", str(filled_path), "--head", hashes[-1]]) == 0
    assert "matches the chain head" in capsys.readouterr().out
    assert main(["audit", "verify", str(filled_path), "--head", hashes[0]]) == 0
    assert f"the chain has moved on {len(hashes) - 1} entries since" in capsys.readouterr().out
    assert main(["audit", "verify", str(filled_path), "--head", "ab" * 32]) == 4
    assert "is not in this audit trail" in capsys.readouterr().err


def test_backup_is_recorded_after_the_verified_copy(filled_path, tmp_path):
    dest = tmp_path / "copy.bak"
    with Workspace.open(filled_path) as ws:
        ws.backup(dest, actor="lead")
        entry = ws.audit_entries()[-1]
    assert entry.action == "workspace.backup" and entry.details["integrity_check"] == "ok"
    copy = sqlite3.connect(dest)
    assert copy.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    # the copy was taken before its own entry: it holds everything up to the entry before
    assert copy.execute("SELECT MAX(id) FROM audit_log").fetchone()[0] == entry.id - 1
    copy.close()


@pytest.mark.parametrize("failure", [KeyboardInterrupt, sqlite3.OperationalError("disk I/O error")])
def test_failed_or_interrupted_backup_leaves_no_entry_and_no_file(filled_path, tmp_path, monkeypatch, failure):
    dest = tmp_path / "copy.bak"
    with Workspace.open(filled_path) as ws:
        before = ws.audit_head()
        real = sqlite3.Connection.backup

        class Connection(sqlite3.Connection):
            def backup(self, target, **kwargs):
                real(self, target, pages=1)  # part of the copy is written, then it stops
                raise failure

        ws.close()
        monkeypatch.setattr(sqlite3, "connect", _factory(sqlite3.connect, Connection))
        ws = Workspace.open(filled_path)
        with pytest.raises((KeyboardInterrupt, WorkspaceError)):
            ws.backup(dest, actor="lead")
        monkeypatch.undo()
        assert ws.audit_head() == before
        ws.close()
    assert sorted(p.name for p in tmp_path.iterdir() if "copy" in p.name) == []


def test_backup_that_fails_its_check_is_not_kept(filled_path, tmp_path, monkeypatch):
    dest = tmp_path / "copy.bak"
    real_connect = sqlite3.connect

    class Checked(sqlite3.Connection):
        def execute(self, sql, *args):
            if sql.startswith("PRAGMA integrity_check"):
                return real_connect(":memory:").execute("SELECT 'row 3 missing from index'")
            return super().execute(sql, *args)

    with Workspace.open(filled_path) as ws:
        before = ws.audit_head()
        monkeypatch.setattr(sqlite3, "connect",
                            lambda target, *a, **k: real_connect(target, *a, factory=Checked, **k)
                            if str(target).endswith(tuple(f"partial-{n}" for n in [__import__('os').getpid()]))
                            else real_connect(target, *a, **k))
        with pytest.raises(WorkspaceError, match="integrity"):
            ws.backup(dest, actor="lead")
        monkeypatch.undo()
        assert ws.audit_head() == before
    assert not any("copy" in p.name for p in tmp_path.iterdir())


def _factory(connect, cls):
    def make(*args, **kwargs):
        kwargs.setdefault("factory", cls)
        return connect(*args, **kwargs)
    return make


def test_backup_entry_keeps_no_folder_and_withholds_a_name_that_may_identify(filled_path, tmp_path):
    # the audit trail is append-only: a folder or file name naming a person must never reach it
    folder = tmp_path / "Mary Smith"
    folder.mkdir()
    with Workspace.open(filled_path) as ws:
        ws.backup(folder / "Mary Smith notes.cvw", actor="lead")
        ws.backup(folder / "weekly.cvw", actor="lead")
        first, second = [e for e in ws.audit_entries() if e.action == "workspace.backup"]
        assert ws.audit_verify().ok
    text = repr(first.details) + repr(second.details)
    assert "Mary" not in text and "Smith" not in text and str(tmp_path) not in text
    assert first.details["destination"].endswith("(name withheld)")
    assert second.details["destination"] == "weekly.cvw" and len(second.details["sha256"]) == 64
