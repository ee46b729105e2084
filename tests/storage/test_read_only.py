"""Reading commands work on a read-only workspace; writes are refused with one clear line (issue 12, item 9).

Tests run as root in CI, where chmod does not stop writes. The real check therefore mounts the workspace's
folder read-only inside a user and mount namespace (``unshare -rm``, no privileges needed; a read-only
bind mount gives EROFS even to root); without unshare, a non-root run uses chmod 0444/0555 instead. A
forced ``read_only=True`` open exercises SQLite's ``mode=ro`` path everywhere.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys

import pytest

from caseview.errors import WorkspaceError
from caseview.storage import Workspace
from caseview.timeline_io import import_timelines

READING = [
    ["score", "{ws}", "--as-of", "2025-06-01", "--out", "{out}/scores.csv"],
    ["history", "{ws}", "HS-0001", "--out", "{out}/history.csv"],
    ["audit", "verify", "{ws}"],
    ["audit", "show", "{ws}"],
    ["export", "{ws}", "--out", "{out}/timelines.xlsx"],
    ["reviews", "{ws}"],
    ["flags", "{ws}", "--as-of", "2025-06-01", "--out", "{out}/flags.csv"],
    ["check", "{ws}"],
]

_RUNNER = """
import json, sys, io, contextlib
from caseview.cli.main import main
results = []
for argv in json.loads(sys.argv[1]):
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(argv)
    results.append([code, err.getvalue()])
print(json.dumps(results))
"""


@pytest.fixture
def shared_ws(tmp_path, model_text, small_csv):
    folder = tmp_path / "team"
    folder.mkdir()
    path = folder / "team.cvw"
    with Workspace.create(path, model_text, "tester") as ws:
        import_timelines(ws, small_csv, "tester")
    return path


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_forced_read_only_open_reads_and_refuses_writes(shared_ws, tmp_path):
    from caseview.followup import record_review
    from caseview.scoring import score_caseload
    from caseview.timeline_io import export_timelines

    before = _digest(shared_ws)
    with Workspace.open(shared_ws, read_only=True) as ws:
        assert ws.read_only and ws.audit_verify().ok
        assert score_caseload(ws, __import__("datetime").date(2025, 6, 1)).n_cases == 3
        result = export_timelines(ws, tmp_path / "t.csv", "tester")
        assert not result.recorded and result.rows == 5
        with pytest.raises(WorkspaceError, match="open read-only"):
            record_review(ws, "HS-0001", "acknowledged", "", "sup", as_of=__import__("datetime").date(2025, 6, 1))
        with pytest.raises(WorkspaceError, match="open read-only"):
            ws.set_setting("x", 1, "sup")
    assert _digest(shared_ws) == before
    for leftover in shared_ws.parent.iterdir():  # a read-only connection may leave an empty -wal/-shm
        assert leftover.stat().st_mode & 0o077 == 0, leftover


def test_read_only_workspace_that_needs_an_upgrade_is_refused(shared_ws, monkeypatch):
    from caseview.storage import schema

    monkeypatch.setattr(schema, "MIGRATIONS", schema.MIGRATIONS + ["CREATE TABLE later_marker (x);"])
    with pytest.raises(WorkspaceError, match="must be upgraded .* read-only here"):
        Workspace.open(shared_ws, read_only=True)


def _unshare_works() -> bool:
    if not shutil.which("unshare"):
        return False
    probe = subprocess.run(["unshare", "-rm", "sh", "-c", "mount -t tmpfs none /mnt 2>/dev/null || "
                            "mount --bind / / && true"], capture_output=True, timeout=30)
    return probe.returncode == 0


def _run_read_only(folder, commands, python=sys.executable):
    script = [python, "-c", _RUNNER, json.dumps(commands)]
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path))
    if _unshare_works():
        mount = f"mount --bind '{folder}' '{folder}' && mount -o remount,ro,bind '{folder}' && exec \"$@\""
        run = subprocess.run(["unshare", "-rm", "sh", "-c", mount, "sh", *script], capture_output=True, text=True,
                             env=env, timeout=300)
    elif os.geteuid() != 0:
        os.chmod(folder / "team.cvw", 0o444)
        os.chmod(folder, 0o555)
        try:
            run = subprocess.run(script, capture_output=True, text=True, env=env, timeout=300)
        finally:
            os.chmod(folder, 0o755)
    else:
        pytest.skip("running as root without unshare: no way to make the folder read-only for this process")
    assert run.returncode == 0, run.stderr
    return json.loads(run.stdout.strip().splitlines()[-1])


def test_reading_commands_work_on_a_read_only_folder(shared_ws, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    before = _digest(shared_ws)
    commands = [[a.format(ws=shared_ws, out=out) for a in argv] for argv in READING]
    commands.append(["import", str(shared_ws), str(shared_ws.parent.parent / "timelines.csv")])
    results = _run_read_only(shared_ws.parent, commands)
    for argv, (code, err) in zip(commands[:-1], results[:-1]):
        assert code == 0, (argv, err)
        assert "Traceback" not in err
    code, err = results[-1]
    assert code != 0 and "read-only" in err and len(err.strip().splitlines()) == 1, err
    assert _digest(shared_ws) == before
    assert sorted(p.name for p in out.iterdir()) == ["flags.csv", "history.csv", "scores.csv", "timelines.xlsx"]
