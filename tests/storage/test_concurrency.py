"""Two processes writing one workspace: no lost update, and a clear busy message.

SQLite serialises writers; ``BEGIN IMMEDIATE`` takes the write lock up front and waits up to
``busy_timeout`` (SQLite docs, "BEGIN TRANSACTION" and "PRAGMA busy_timeout").
"""

from __future__ import annotations

import os
import subprocess
import sys

from caseview.storage import Workspace
from storage_helpers import write_csv


def test_busy_message_when_another_process_holds_the_write_lock(ws, small_csv, tmp_path):
    path = ws.path
    holder = Workspace.open(path)
    env = dict(os.environ, CASEVIEW_BUSY_TIMEOUT_MS="200")
    with holder.transaction():
        holder.audit_append("holder", "note", "t", {})
        run = subprocess.run([sys.executable, "-m", "caseview", "import", str(path), str(small_csv)],
                             capture_output=True, text=True, env=env, timeout=60)
    holder.close()
    assert run.returncode == 3, run.stderr
    assert "workspace busy: another caseview process is writing to" in run.stderr
    assert "Traceback" not in run.stderr
    assert ws.contact_count() == 0
    again = subprocess.run([sys.executable, "-m", "caseview", "import", str(path), str(small_csv)],
                           capture_output=True, text=True, timeout=60)
    assert again.returncode == 0 and "contacts added: 5" in again.stdout


def test_concurrent_imports_lose_nothing(ws, tmp_path):
    files = []
    for k in range(3):
        rows = [[f"HS-{k}{i:03d}", f"2025-0{1 + i % 9}-1{i % 10}", f"C{1 + k}", "normal", "", "", "0", "1", ""]
                for i in range(40)]
        files.append(write_csv(tmp_path / f"part{k}.csv", rows))
    procs = [subprocess.Popen([sys.executable, "-m", "caseview", "import", str(ws.path), str(f), "--by", f"p{k}"],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for k, f in enumerate(files)]
    results = [p.communicate(timeout=120) for p in procs]
    assert all(p.returncode == 0 for p in procs), results
    assert ws.case_count() == 120 and ws.contact_count() == 120
    imports = [e for e in ws.audit_entries() if e.action == "import"]
    assert sorted(e.actor for e in imports) == ["p0", "p1", "p2"]
    assert ws.audit_verify().ok
