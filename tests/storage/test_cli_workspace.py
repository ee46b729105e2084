"""The workspace commands from a subprocess, exactly as outside checks call them."""

from __future__ import annotations

import sqlite3
import subprocess
import sys

from storage_helpers import DEMO_MODEL_PATH, HEADER, ROWS, write_csv


def _cv(*args, check=True):
    run = subprocess.run([sys.executable, "-m", "caseview", *map(str, args)], capture_output=True, text=True,
                         timeout=120)
    assert "Traceback" not in run.stderr
    if check:
        assert run.returncode == 0, run.stderr
    return run


def test_init_import_export_backup(tmp_path):
    ws = tmp_path / "team workspace"  # any path, no extension
    out = _cv("init", ws, "--model", DEMO_MODEL_PATH, "--by", "lead")
    assert "created workspace" in out.stdout
    again = _cv("init", ws, "--model", DEMO_MODEL_PATH, check=False)
    assert again.returncode != 0 and "already exists" in again.stderr and len(again.stderr.splitlines()) == 1
    source = write_csv(tmp_path / "in.csv", ROWS, header=["ref"] + HEADER[1:] + ["notes"])
    check = _cv("import", ws, source, "--map", "ref=case_id", "--drop", "notes", "--check")
    assert "nothing was stored" in check.stdout and "contacts would be added: 5" in check.stdout
    run = _cv("import", ws, source, "--map", "ref=case_id", "--drop", "notes", "--by", "coordinator-a")
    for line in ("cases added: 3", "contacts added: 5", "exact duplicates skipped: 0", "replaced: 0"):
        assert line in run.stdout
    bad_map = _cv("import", ws, source, "--map", "ref", check=False)
    assert bad_map.returncode != 0 and "SOURCE=TARGET" in bad_map.stderr
    exported = tmp_path / "out.csv"
    run = _cv("export", ws, "--out", exported)
    head = run.stdout.strip().splitlines()[-1].split()[-1]
    assert len(head) == 64
    verify = _cv("audit", "verify", ws)
    assert head in verify.stdout  # the printed head is the chain head after the export entry
    assert exported.read_text().splitlines()[0] == ",".join(HEADER + ["contact_kind"])  # the import layout
    run = _cv("import", ws, exported)
    assert "exact duplicates skipped: 5" in run.stdout
    backup = tmp_path / "copy.bak"
    _cv("backup", ws, backup)
    con = sqlite3.connect(backup)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert con.execute("SELECT COUNT(*) FROM contacts").fetchone()[0] == 5
    con.close()
    shown = _cv("audit", "show", ws)
    assert "coordinator-a\timport" in shown.stdout and "workspace.backup" in shown.stdout
    refuse = _cv("import", tmp_path / "in.csv", source, check=False)
    assert refuse.returncode != 0 and "not a caseview workspace" in refuse.stderr
