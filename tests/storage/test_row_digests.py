"""Records edited outside caseview are found by ``audit verify`` (issue 12, item 2).

Each test edits the file directly with sqlite3 (no trigger stops that), as the reported session did,
and checks that the verification fails and names the first record that differs.
"""

from __future__ import annotations

import datetime as dt
import json
import sqlite3

import numpy as np
import pytest

from caseview.storage import Workspace
from caseview.storage import row_digests as digests
from caseview.storage import schema
from caseview.timeline_io import import_timelines
from storage_helpers import ROWS, as_caseview_before_case_packs, generated_rows, write_csv


@pytest.fixture
def filled(ws, small_csv):
    import_timelines(ws, small_csv, "tester")
    return ws


def _forge(path, sql, params=()):
    con = sqlite3.connect(path)
    con.execute(sql, params)
    con.commit()
    con.close()


def _verify(path):
    with Workspace.open(path) as ws:
        return ws.audit_verify()


def test_untouched_workspace_verifies_with_every_record_checked(filled):
    result = filled.audit_verify()
    assert result.ok and result.rows_checked, result.problem
    # 3 cases + 1 model version + channels/categories/covariates/coordinators rows
    assert result.n_records >= 3 + 1


def test_forged_review_status_is_named(filled):
    from caseview.followup import record_review

    record_review(filled, "HS-0002", "acknowledged", "seen", "sup", as_of=dt.date(2025, 3, 1))
    path = filled.path
    assert filled.audit_verify().ok
    filled.close()
    _forge(path, "UPDATE reviews SET status = 'dismissed', note = 'forged' WHERE id = 1")
    result = _verify(path)
    assert not result.ok
    assert result.problem == "review 1 of case HS-0002 does not match the audit trail (changed outside caseview)"


@pytest.mark.parametrize("sql, expected", [
    ("UPDATE contacts SET covariates = zeroblob(length(covariates)) WHERE day = (SELECT MAX(day) FROM contacts "
     "WHERE case_id = (SELECT id FROM cases WHERE case_code = 'HS-0001'))",
     "case HS-0001 (its record or contacts) does not match the audit trail"),
    ("DELETE FROM contacts WHERE case_id = (SELECT id FROM cases WHERE case_code = 'HS-0003')",
     "case HS-0003 (its record or contacts) does not match the audit trail"),
    ("UPDATE contacts SET stage_known = 'Crisis' WHERE case_id = (SELECT id FROM cases WHERE case_code = 'HS-0002') "
     "AND day = (SELECT MIN(day) FROM contacts WHERE case_id = (SELECT id FROM cases WHERE case_code = 'HS-0002'))",
     "case HS-0002 (its record or contacts) does not match the audit trail"),
    ("UPDATE cases SET coordinator = 'C9' WHERE case_code = 'HS-0002'",
     "case HS-0002 (its record or contacts) does not match the audit trail"),
    ("INSERT INTO cases (case_code, coordinator) VALUES ('HS-0100', 'C1')",
     "case HS-0100 (its record or contacts) is not in the audit trail (added outside caseview)"),
    ("UPDATE model_versions SET json_text = replace(json_text, '\"Stable\"', '\"Stable \"') WHERE id = 1",
     "model version 1 does not match the audit trail"),
    ("UPDATE categories SET label = 'fine' WHERE label = 'normal'",
     "does not match the audit trail"),
])
def test_forged_records_are_named(filled, sql, expected):
    path = filled.path
    filled.close()
    _forge(path, sql)
    result = _verify(path)
    assert not result.ok and expected in result.problem, result.problem


def test_forged_setting_is_named(filled):
    filled.set_setting("rules", {"threshold": 0.5}, "lead")
    path = filled.path
    filled.close()
    _forge(path, "UPDATE settings SET value = '{\"threshold\":0.9}' WHERE key = 'rules'")
    assert _verify(path).problem.startswith("setting 'rules' does not match the audit trail")


def _forge_case_and_locator(path, code):
    _forge(path, "UPDATE cases SET coordinator = 'C9' WHERE case_code = ?", (code,))
    con = sqlite3.connect(path)
    new = digests.current_case_digests(con, [code])[code].hex()
    con.execute("UPDATE row_digests SET digest = ? WHERE set_name = 'cases' AND key = ?", (new, code))
    con.commit()
    con.close()


def test_forging_the_locator_too_is_still_found(filled, tmp_path, rng):
    path = filled.path
    filled.close()
    _forge_case_and_locator(path, "HS-0002")  # a small import lists its cases in the entry: still named
    assert _verify(path).problem.startswith("case HS-0002 (its record or contacts) does not match")
    big = tmp_path / "big.cvw"
    Workspace.create(big, filled_model_text(), "tester").close()
    with Workspace.open(big) as ws:
        import_timelines(ws, write_csv(tmp_path / "g.csv", generated_rows(digests.KEYS_IN_ENTRY + 5, 2, rng)), "t")
    _forge_case_and_locator(big, "HS-0003")  # a bulk import does not list its cases: found, not located
    result = _verify(big)
    assert not result.ok and "could not be located" in result.problem


def filled_model_text():
    from storage_helpers import DEMO_MODEL_PATH

    return DEMO_MODEL_PATH.read_text(encoding="utf-8")


def test_legitimate_writes_keep_verifying(ws, small_csv, tmp_path, model_text, rng):
    """Imports (new and existing cases, --replace), a model that widens every contact, settings, snapshots."""
    import_timelines(ws, small_csv, "a")
    more = write_csv(tmp_path / "more.csv", generated_rows(30, 4, rng) + [
        ["HS-0001", "2025-06-01", "", "normal", "", "", "1", "0", "Stable"]])
    import_timelines(ws, more, "b")
    changed = [list(r) for r in ROWS]
    changed[0][3] = "slow"
    import_timelines(ws, write_csv(tmp_path / "changed.csv", changed), "c", replace=True)
    assert ws.audit_verify().ok, ws.audit_verify().problem
    model = json.loads(model_text)
    model["covariates"] = list(model["covariates"]) + [{"name": "new_measure", "kind": "numeric"}]
    ws.add_model_version(json.dumps(model), "adds a covariate", "lead")  # every contact gets a NaN column
    result = ws.audit_verify()
    assert result.ok, result.problem
    from caseview.followup import assess_caseload
    from caseview.followup.assess import save_run

    ws.set_current_model(1, "lead")
    save_run(ws, assess_caseload(ws, dt.date(2025, 12, 1), 90.0), "lead")
    assert ws.audit_verify().ok
    path = ws.path
    ws.close()
    _forge(path, "UPDATE case_scores SET p_follow_up_now = 0.123456 WHERE rowid IN (SELECT rowid FROM case_scores LIMIT 1)")
    assert _verify(path).problem.startswith("score run 1 does not match the audit trail")


def test_fast_digests_equal_the_stored_rows(ws, tmp_path, rng):
    """The import's array path and the row-by-row reading give the same digest for every case."""
    rows = generated_rows(25, 5, rng)
    rows[3][8] = "Struggling|Crisis"
    rows[7][2] = ""
    import_timelines(ws, write_csv(tmp_path / "g.csv", rows), "tester")
    recorded = dict(ws.connection.execute("SELECT key, digest FROM row_digests WHERE set_name = 'cases'").fetchall())
    stored = {k: v.hex() for k, v in digests.current_case_digests(ws.connection).items()}
    assert recorded == stored and len(stored) == 25
    entry = [e for e in ws.audit_entries() if e.action == "import"][-1]
    total = sum(int(v, 16) for v in stored.values()) % digests.MODULUS
    assert int(entry.details["row_digests"]["cases"]["added"], 16) == total
    assert entry.details["row_digests"]["cases"]["count"] == 25


def test_older_workspace_gets_a_baseline_entry(tmp_path, model_text, small_csv, monkeypatch):
    path = tmp_path / "old.cvw"
    digests_at = schema.MIGRATIONS.index(schema.ROW_DIGESTS)
    with monkeypatch.context() as patch:  # a workspace made before row digests existed
        patch.setattr(schema, "MIGRATIONS", schema.MIGRATIONS[:digests_at])
        as_caseview_before_case_packs(patch)
        from caseview.storage import audit

        patch.setattr(audit, "append", _append_without_digests(audit.append))
        with Workspace.create(path, model_text, "tester") as old:
            import_timelines(old, small_csv, "tester")
            assert old.connection.execute("SELECT name FROM sqlite_master WHERE name = 'row_digests'").fetchone() is None
    with Workspace.open(path) as ws:
        entries = ws.audit_entries()
        assert [e.action for e in entries[-2:]] == ["workspace.migrate", "audit.baseline"]
        assert entries[-1].details["note"] == "baseline digest of existing rows"
        assert entries[-1].details["row_digests"]["cases"]["count"] == 3
        assert ws.audit_verify().ok
    _forge(path, "UPDATE cases SET coordinator = 'C9' WHERE case_code = 'HS-0001'")
    assert "case HS-0001" in _verify(path).problem


def _append_without_digests(append):
    def old_append(connection, actor, action, target, details, changes=None, at_utc=None):
        return append(connection, actor, action, target, details, changes=None, at_utc=at_utc)
    return old_append


def test_unknown_set_is_refused(ws):
    with pytest.raises(ValueError, match="unknown protected set"):
        with ws.transaction() as con:
            digests.record_row_changes(con, digests.RowChanges(rows={"contact_notes": [1]}))


def test_case_digest_arrays_match_rows_by_hand():
    """One case, one contact: the digest is SHA-256 over the documented bytes (format in row_digests)."""
    import hashlib

    obs = np.array([[1, 255]], dtype=np.uint8)
    cov = np.array([[0.5]])
    got = digests.case_digests_from_arrays(["HS-0001"], ["C1"], np.array([0, 1]), np.array([20000]), obs, cov,
                                           ["Stable"], ["C1"])[0]
    text = lambda t: hashlib.sha256(t.encode()).digest()[:16]  # noqa: E731
    record = ((20000).to_bytes(8, "little", signed=True) + (2).to_bytes(2, "little") + text("Stable") + text("C1")
              + b"\x00" + bytes([1, 255]) + np.array([0.5], dtype="<f8").tobytes())  # \x00 = scheduled
    assert got == hashlib.sha256(b"caseview.case.v1\x00HS-0001\x00C1\x00" + record).digest()


def test_a_contact_kind_changed_outside_caseview_is_named(filled):
    """contact_kind is part of the case digest: flipping it with plain SQL is found and the case named."""
    path = filled.path
    filled.close()
    _forge(path, "UPDATE contacts SET contact_kind = 'unscheduled' WHERE case_id = (SELECT id FROM cases "
                 "WHERE case_code = 'HS-0002') AND day = (SELECT MIN(day) FROM contacts WHERE case_id = "
                 "(SELECT id FROM cases WHERE case_code = 'HS-0002'))")
    result = _verify(path)
    assert not result.ok
    assert "case HS-0002 (its record or contacts) does not match the audit trail" in result.problem, result.problem


def test_both_digest_paths_agree_with_unscheduled_contacts(ws, tmp_path, rng):
    """An import with unscheduled contacts: the array path (writer, fetch_contacts) equals the row path."""
    from storage_helpers import HEADER

    rows = generated_rows(12, 4, rng)
    kinds = ["unscheduled" if i % 3 == 0 else "scheduled" for i in range(len(rows))]
    import_timelines(ws, write_csv(tmp_path / "k.csv", [r + [k] for r, k in zip(rows, kinds)],
                                   HEADER + ["contact_kind"]), "tester")
    assert ws.stored_contacts().unscheduled.sum() == kinds.count("unscheduled")
    con = ws.connection
    recorded = dict(con.execute("SELECT key, digest FROM row_digests WHERE set_name = 'cases'").fetchall())
    fast = {k: v.hex() for k, v in digests.current_case_digests(con).items()}
    by_row = {k: v.hex() for k, v in digests._case_digests_from_rows(
        con.execute(digests._CASE_ROWS.format(where=""))).items()}
    assert recorded == fast == by_row and len(by_row) == 12
    flipped = np.zeros(1, dtype=bool), np.ones(1, dtype=bool)
    one = [digests.case_digests_from_arrays(["HS-0001"], ["C1"], np.array([0, 1]), np.array([20000]),
                                            np.array([[1]], dtype=np.uint8), np.array([[0.5]]), [""], ["C1"],
                                            unscheduled=u)[0] for u in flipped]
    assert one[0] != one[1]
    assert ws.audit_verify().ok
