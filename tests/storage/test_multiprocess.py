"""Several processes on one workspace while one behaves like the window: nothing that reported success is lost.

The failure this guards against (issue 12, item 1): opening the workspace file with a plain
``open()`` and closing it drops every POSIX advisory lock the process holds on that file, so another
process closing its last connection believes it is the last user, checkpoints and deletes the WAL and
the shared-memory index while the window still uses them ("How To Corrupt An SQLite Database File",
section 2.2, sqlite.org/howtocorrupt.html). The window's later writes then go to a deleted file.
"""

from __future__ import annotations

import multiprocessing
import sqlite3
import time

import pytest

import workspace_users as users
from caseview.storage import Workspace


def _run(path, folder, importers=3, batches=12, window=True):
    ctx = multiprocessing.get_context("spawn")
    queue, stop = ctx.Queue(), ctx.Event()
    procs = [ctx.Process(target=users.importer, args=(str(path), str(folder), k, batches, queue))
             for k in range(importers)]
    watcher = ctx.Process(target=users.window_like, args=(str(path), stop, queue)) if window else None
    if watcher:
        watcher.start()
        time.sleep(0.5)
    for p in procs:
        p.start()
    results = []
    expected = importers * batches
    deadline = time.time() + 120
    while sum(1 for r in results if r[0] == "import") < expected and time.time() < deadline:
        try:
            results.append(queue.get(timeout=5))
        except Exception:
            if not any(p.is_alive() for p in procs):
                break
    for p in procs:
        p.join(30)
    if watcher:
        stop.set()
        watcher.join(30)
    while True:
        try:
            results.append(queue.get(timeout=0.5))
        except Exception:
            break
    return results


def test_window_and_importers_lose_nothing(tmp_path, model_text):
    path = tmp_path / "shared.cvw"
    Workspace.create(path, model_text, "tester").close()
    results = _run(path, tmp_path)
    tally = users.tally(str(path), results)
    print(tally.line())
    assert tally.failures == [], tally.failures[:3]
    assert tally.missing == [], tally.missing[:5]
    assert tally.reported_ok == tally.found == tally.audited
    assert sum(1 for r in results if r[0] == "window") > 3  # the window-like process really wrote
    assert tally.integrity == "ok"
    with Workspace.open(path) as ws:
        assert ws.audit_verify().ok


def test_open_keeps_the_locks_of_other_connections(tmp_path, model_text):
    """Directly: while one connection is open, opening another must not let a second process delete the WAL."""
    import subprocess
    import sys

    path = tmp_path / "locks.cvw"
    Workspace.create(path, model_text, "tester").close()
    held = Workspace.open(path)
    held.case_count()
    Workspace.open(path).close()  # a worker's short-lived connection
    other = "import sqlite3, sys; c = sqlite3.connect(sys.argv[1]); c.execute('SELECT COUNT(*) FROM cases'); c.close()"
    subprocess.run([sys.executable, "-c", other, str(path)], check=True, timeout=60)
    try:
        # the other process was not the last user, so the WAL of the open connection is still there
        assert (tmp_path / "locks.cvw-wal").exists()
        held.audit_append("window", "window.note", "after", {})
    finally:
        held.close()
    con = sqlite3.connect(path)
    assert con.execute("SELECT COUNT(*) FROM audit_log WHERE action = 'window.note'").fetchone()[0] == 1
    con.close()


@pytest.mark.slow
def test_soak_a_minute(tmp_path, model_text):
    """The soak version with reviewers (see benchmarks/soak_workspace.py for the minutes-long run)."""
    counts = users.soak(tmp_path, model_text, seconds=60)
    print(counts.line())
    assert all("busy" in r[2] for r in counts.failures), counts.failures[:3]  # waiting too long is allowed
    assert counts.missing == [] and counts.integrity == "ok"


@pytest.mark.parametrize("suffix", ["", "-wal"])
def test_importing_the_workspace_file_itself_is_refused_without_opening_it(ws, suffix):
    from caseview.errors import InputError
    from caseview.timeline_io import import_timelines

    ws.case_count()
    with pytest.raises(InputError, match="workspace file itself"):
        import_timelines(ws, str(ws.path) + suffix, "tester")
    assert ws.integrity_check() == "ok"
