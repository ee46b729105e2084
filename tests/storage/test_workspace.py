"""Workspace file discipline: create/open/refuse, PRAGMAs, migrations with backup, network warning.

PRAGMA semantics from the SQLite documentation ("PRAGMA statements": journal_mode, synchronous,
foreign_keys, application_id, user_version; "Database File Format" section 1.3: application_id is
the 4-byte big-endian integer at header offset 68, user_version at offset 60).
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest

from caseview.errors import InputError, WorkspaceError
from caseview.storage import Workspace
from caseview.storage import schema
from caseview.storage.filesystem import mount_type, network_warning


def test_create_sets_pragmas_and_identifies_itself(ws):
    con = ws.connection
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert con.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL = 2 (SQLite docs, PRAGMA synchronous)
    assert con.execute("PRAGMA foreign_keys").fetchone()[0] == 1
    assert con.execute("PRAGMA busy_timeout").fetchone()[0] == ws.busy_timeout_ms
    assert con.execute("PRAGMA user_version").fetchone()[0] == schema.schema_version()
    header = ws.path.read_bytes()[:100]
    # SQLite file format 1.3: application_id at offset 68, user_version at offset 60 (big-endian)
    assert int.from_bytes(header[68:72], "big") == schema.APPLICATION_ID
    assert int.from_bytes(header[60:64], "big") == schema.schema_version()
    tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert {"cases", "contacts", "model_versions", "audit_log", "reviews", "score_runs", "case_scores",
            "settings"} <= tables


def test_create_refuses_existing_path(tmp_path, model_text):
    existing = tmp_path / "x"
    existing.write_text("keep me")
    with pytest.raises(WorkspaceError, match="already exists"):
        Workspace.create(existing, model_text, "tester")
    assert existing.read_text() == "keep me"


def test_create_with_bad_model_leaves_no_file(tmp_path):
    with pytest.raises(InputError):
        Workspace.create(tmp_path / "w", '{"format": "something else"}', "tester")
    assert not (tmp_path / "w").exists()


def test_open_refuses_missing_text_and_foreign_sqlite(tmp_path):
    with pytest.raises(WorkspaceError, match="no such workspace"):
        Workspace.open(tmp_path / "nothing-here")
    text = tmp_path / "notes.txt"
    text.write_text("case_id,date\n" * 20)
    with pytest.raises(WorkspaceError, match="not a caseview workspace"):
        Workspace.open(text)
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE t (x)")
    con.commit()
    con.close()
    with pytest.raises(WorkspaceError, match="another program"):
        Workspace.open(other)
    with pytest.raises(WorkspaceError, match="not a file"):
        Workspace.open(tmp_path)


def test_open_refuses_newer_version(ws):
    path = ws.path
    ws.connection.execute(f"PRAGMA user_version = {schema.schema_version() + 1}")
    ws.close()
    with pytest.raises(WorkspaceError, match="newer caseview"):
        Workspace.open(path)


def test_migration_backs_up_first(ws, monkeypatch):
    path = ws.path
    ws.close()
    before = schema.schema_version()
    migration_2 = "CREATE TABLE migration_two_marker (x INTEGER);"
    monkeypatch.setattr(schema, "MIGRATIONS", schema.MIGRATIONS + [migration_2])
    with Workspace.open(path) as upgraded:
        assert upgraded.connection.execute("PRAGMA user_version").fetchone()[0] == before + 1
        assert any("upgraded" in w for w in upgraded.warnings)
        actions = [e.action for e in upgraded.audit_entries()]
        assert actions[-1] == "workspace.migrate"
        assert upgraded.audit_verify().ok
    backups = list(path.parent.glob(path.name + f".v{before}-backup-*"))
    assert len(backups) == 1
    old = sqlite3.connect(backups[0])
    assert old.execute("PRAGMA user_version").fetchone()[0] == before
    assert old.execute("SELECT name FROM sqlite_master WHERE name = 'migration_two_marker'").fetchone() is None
    assert old.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    old.close()


def test_network_file_system_detection():
    mounts = ("/dev/sda1 / ext4 rw 0 0\n"
              "server:/export /mnt/team nfs4 rw 0 0\n"
              "//nas/share /media/share\\040drive cifs rw 0 0\n")
    assert mount_type("/mnt/team/work/ws.cvw", mounts) == "nfs4"
    assert mount_type("/media/share drive/ws", mounts) == "cifs"
    assert mount_type("/home/me/ws.cvw", mounts) == "ext4"
    assert mount_type("/mnt/teamother/ws", mounts) == "ext4"  # prefix of a name is not a mount point
    assert "network file system" in network_warning("/mnt/team/work/ws.cvw", mounts)
    assert network_warning("/home/me/ws.cvw", mounts) is None


def test_model_versions_and_settings_are_audited(ws, model_text):
    data = json.loads(model_text)
    data["name"] = "second"
    v2 = ws.add_model_version(json.dumps(data), "try", "tester", make_current=False)
    assert [v.is_current for v in ws.model_versions()] == [True, False]
    ws.set_current_model(v2, "tester")
    model, version = ws.current_model()
    assert version.id == v2 and model.name == "second"
    with pytest.raises(InputError):
        ws.set_current_model(99, "tester")
    ws.set_setting("horizon_days", 60, "tester")
    assert ws.get_setting("horizon_days") == 60
    assert ws.get_setting("missing", "fallback") == "fallback"
    actions = [e.action for e in ws.audit_entries()]
    assert actions[-3:] == ["model.add", "model.current", "setting.change"]
    assert ws.audit_verify().ok


def test_later_model_reordering_categories_reads_old_contacts(ws, small_csv, model_text):
    from caseview.timeline_io import import_timelines

    import_timelines(ws, small_csv, "tester")
    before = ws.load_caseload(ws.current_model()[0])
    data = json.loads(model_text)
    mobility = data["channels"][0]
    mobility["categories"] = ["unable", "slow", "normal"]
    mobility["probabilities"] = {k: v[::-1] for k, v in mobility["probabilities"].items()}
    ws.add_model_version(json.dumps(data), "reordered", "tester")
    after = ws.load_caseload(ws.current_model()[0])
    np.testing.assert_array_equal(before.raw_values["mobility"], after.raw_values["mobility"])
    old_codes = before.timelines.observations[:, 0]
    expected = np.where(old_codes < 0, -1, 2 - old_codes)
    np.testing.assert_array_equal(after.timelines.observations[:, 0], expected)


def test_load_caseload_layout_and_as_of(ws, small_csv):
    from caseview.timeline_io import import_timelines

    import_timelines(ws, small_csv, "tester")
    model, _ = ws.current_model()
    caseload = ws.load_caseload(model)
    assert list(caseload.case_ids) == ["HS-0001", "HS-0002", "HS-0003"]
    assert list(caseload.coordinators) == ["C2", "C3", ""]
    np.testing.assert_array_equal(caseload.timelines.offsets, [0, 2, 4, 5])
    day = lambda s: int(np.datetime64(s, "D").astype(np.int64))  # noqa: E731
    assert caseload.contact_days.tolist() == [day("2025-01-05"), day("2025-03-05"), day("2025-01-10"),
                                              day("2025-02-10"), day("2024-11-30")]
    assert caseload.timelines.allowed_stages[1].tolist() == [False, False, True, True, False]
    assert caseload.timelines.allowed_stages[4].tolist() == [True, False, False, False, False]
    assert caseload.timelines.observations[1].tolist() == [-1, 0, 2]
    assert caseload.raw_values["mobility"].tolist() == ["slow", "", "normal", "unable", "normal"]
    assert caseload.timelines.covariates[1].tolist() == [0.0, 1.0]
    cut = ws.load_caseload(model, as_of_day=day("2025-01-31"))
    assert list(cut.case_ids) == ["HS-0001", "HS-0002", "HS-0003"]
    assert cut.timelines.n_contacts == 3
    early = ws.load_caseload(model, as_of_day=day("2025-01-06"))
    assert list(early.case_ids) == ["HS-0001", "HS-0003"]
    assert ws.case_count() == 3 and ws.contact_count() == 5
