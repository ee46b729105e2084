"""Crash safety: kill -9 real ``python -m caseview import`` processes at random moments.

After every kill the workspace must pass ``PRAGMA integrity_check`` (SQLite docs, "PRAGMA
integrity_check"), hold either all of the import or none of it (atomic commit, SQLite docs
"Atomic Commit In SQLite" / WAL), keep a valid audit chain, and the next command must work.
"""

from __future__ import annotations

import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time

import pytest

from caseview.storage import Workspace
from caseview.timeline_io import import_timelines
from storage_helpers import ROWS, generated_rows, write_csv

N_TRIALS = 20


@pytest.fixture(scope="module")
def crash_setup(tmp_path_factory):
    import numpy as np

    from storage_helpers import DEMO_MODEL_PATH

    root = tmp_path_factory.mktemp("crash")
    rows = generated_rows(2000, 10, np.random.default_rng(int(os.environ.get("CASEVIEW_TEST_SEED", "20261202"))))
    big = write_csv(root / "big.csv", rows)
    base = root / "base.cvw"
    with Workspace.create(base, DEMO_MODEL_PATH.read_text(encoding="utf-8"), "tester") as ws:
        import_timelines(ws, write_csv(root / "first.csv", ROWS), "tester")
    return root, big, base, len(rows)


def test_kill_minus_nine_during_import(crash_setup, rng):
    root, big, base, n_rows = crash_setup
    start = time.monotonic()
    # one uninterrupted run tells how long an import takes here
    full = root / "full.cvw"
    shutil.copy(base, full)
    t0 = time.monotonic()
    done = subprocess.run([sys.executable, "-m", "caseview", "import", str(full), str(big)],
                          capture_output=True, text=True, timeout=120)
    duration = time.monotonic() - t0
    assert done.returncode == 0, done.stderr
    outcomes = {"none": 0, "all": 0}
    for trial in range(N_TRIALS):
        target = root / f"trial{trial}.cvw"
        shutil.copy(base, target)
        proc = subprocess.Popen([sys.executable, "-m", "caseview", "import", str(target), str(big)],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(float(rng.uniform(0.3, 1.05)) * duration)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        con = sqlite3.connect(target)
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        contacts = con.execute("SELECT COUNT(*) FROM contacts").fetchone()[0]
        imports = con.execute("SELECT COUNT(*) FROM audit_log WHERE action = 'import'").fetchone()[0]
        con.close()
        assert contacts in (len(ROWS), len(ROWS) + n_rows), contacts
        state = "all" if contacts == len(ROWS) + n_rows else "none"
        assert imports == (2 if state == "all" else 1)  # the import's audit entry commits with its rows
        outcomes[state] += 1
        with Workspace.open(target) as ws:  # the next command works
            assert ws.audit_verify().ok
            assert ws.contact_count() == contacts
        for suffix in ("", "-wal", "-shm"):
            try:
                os.unlink(str(target) + suffix)
            except OSError:
                pass
    print(f"kill -9 trials: {N_TRIALS}, all survived; outcomes {outcomes}; uninterrupted import {duration:.2f} s; "
          f"total {time.monotonic() - start:.1f} s")
    assert outcomes["none"] >= 1  # at least one kill landed before the commit
