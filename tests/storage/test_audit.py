"""The audit trail: hash chain verification and append-only triggers.

Intent: an audit trail that records who did what when and never obscures earlier entries
(21 CFR 11.10(e)). Mechanism: each entry's hash covers the previous entry's hash (hash chaining,
Schneier & Kelsey 1999, "Secure audit logs to support computer forensics"), so an attacker who
edits, deletes or reorders entries breaks the chain at the first changed entry. The attacker in
these tests drops the triggers with raw sqlite3, as someone with the file would.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import subprocess
import sys

import pytest

from caseview.storage import Workspace
from caseview.storage.audit import GENESIS_HASH


def _filled(ws, n=6):
    for i in range(n):
        ws.audit_append("tester", "review.add", f"HS-000{i}", {"case_id": f"HS-000{i}", "note": f"n{i}"})
    path = ws.path
    ws.close()
    return path


def _attack(path, *statements):
    con = sqlite3.connect(path)
    con.execute("DROP TRIGGER audit_log_no_update")
    con.execute("DROP TRIGGER audit_log_no_delete")
    for s in statements:
        con.execute(s)
    con.commit()
    con.close()


def test_chain_is_sha256_over_fields(ws):
    entry = ws.audit_append("tester", "note", "target", {"b": 1, "a": "x"})
    assert ws.audit_entries()[0].prev_hash == GENESIS_HASH
    # recompute independently with hashlib: canonical JSON of the fields, sorted keys
    payload = json.dumps([entry.id, entry.at_utc, "tester", "note", "target", '{"a":"x","b":1}', entry.prev_hash],
                         sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert entry.entry_hash == hashlib.sha256(payload.encode("utf-8")).hexdigest()
    result = ws.audit_verify()
    assert result.ok and result.head_hash == entry.entry_hash == ws.audit_head()


def test_triggers_refuse_update_and_delete(ws):
    ws.audit_append("tester", "note", "t", {})
    with pytest.raises(sqlite3.DatabaseError, match="append-only"):
        ws.connection.execute("UPDATE audit_log SET actor = 'someone else'")
    with pytest.raises(sqlite3.DatabaseError, match="append-only"):
        ws.connection.execute("DELETE FROM audit_log WHERE id = 1")


def test_verify_detects_edited_entry(ws):
    path = _filled(ws)
    _attack(path, "UPDATE audit_log SET actor = 'supervisor' WHERE id = 4")
    with Workspace.open(path) as again:
        result = again.audit_verify()
    assert not result.ok and result.first_bad_id == 4 and "edited" in result.problem


def test_verify_detects_deleted_entry(ws):
    path = _filled(ws)
    _attack(path, "DELETE FROM audit_log WHERE id = 5")
    with Workspace.open(path) as again:
        result = again.audit_verify()
    assert not result.ok and result.first_bad_id == 6 and "missing" in result.problem


def test_verify_detects_deleted_and_renumbered(ws):
    path = _filled(ws)
    _attack(path, "DELETE FROM audit_log WHERE id = 3", "UPDATE audit_log SET id = id - 1 WHERE id > 3")
    with Workspace.open(path) as again:
        result = again.audit_verify()
    assert not result.ok and result.first_bad_id == 3


def test_verify_detects_reordered_entries(ws):
    path = _filled(ws)
    # swap the contents of entries 4 and 5 (ids stay in order, as a reordering attacker would do)
    _attack(path, "UPDATE audit_log SET id = -4 WHERE id = 4", "UPDATE audit_log SET id = 4 WHERE id = 5",
            "UPDATE audit_log SET id = 5 WHERE id = -4")
    with Workspace.open(path) as again:
        result = again.audit_verify()
    assert not result.ok and result.first_bad_id == 4


def test_cli_verify_exit_code_and_show(ws):
    path = _filled(ws)
    cmd = [sys.executable, "-m", "caseview", "audit"]
    ok = subprocess.run(cmd + ["verify", str(path)], capture_output=True, text=True)
    assert ok.returncode == 0 and "intact" in ok.stdout
    shown = subprocess.run(cmd + ["show", str(path), "--case", "HS-0002"], capture_output=True, text=True)
    assert shown.returncode == 0 and "1 entries shown" in shown.stdout and "HS-0002" in shown.stdout
    since = subprocess.run(cmd + ["show", str(path), "--since", "2999-01-01"], capture_output=True, text=True)
    assert "0 entries shown" in since.stdout
    bad_date = subprocess.run(cmd + ["show", str(path), "--since", "tomorrow"], capture_output=True, text=True)
    assert bad_date.returncode != 0 and "Traceback" not in bad_date.stderr
    _attack(path, "UPDATE audit_log SET details_json = '{}' WHERE id = 2")
    broken = subprocess.run(cmd + ["verify", str(path)], capture_output=True, text=True)
    assert broken.returncode != 0 and "entry 2" in broken.stderr and "Traceback" not in broken.stderr
