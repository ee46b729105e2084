"""A full disk gives one clear line, no traceback, no partial file and no audit entry (issue 12, item 9).

The disk is a small tmpfs mounted inside a user and mount namespace (``unshare -rm``; no privileges
needed, gone when the process ends). Without unshare the failure is injected at the write helper.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import subprocess
import sys

import pytest

from caseview.storage import Workspace
from caseview.timeline_io import import_timelines
from storage_helpers import generated_rows, write_csv

_RUNNER = """
import json, os, sys, io, contextlib
from caseview.cli.main import main
folder = sys.argv[2]
results = []
for argv in json.loads(sys.argv[1]):
    if argv == ["FILL"]:
        try:
            with open(os.path.join(folder, "filler"), "wb") as fh:
                while True:
                    fh.write(b"x" * 4096)
                    fh.flush()
        except OSError:
            pass
        continue
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(argv)
    results.append([argv[0], code, err.getvalue(), sorted(os.listdir(folder))])
print(json.dumps(results))
"""


def _unshare_works() -> bool:
    if not shutil.which("unshare"):
        return False
    return subprocess.run(["unshare", "-rm", "sh", "-c", "mount -t tmpfs -o size=64k none /mnt"],
                          capture_output=True, timeout=30).returncode == 0


@pytest.fixture
def big_ws(tmp_path, model_text, rng):
    path = tmp_path / "team.cvw"
    with Workspace.create(path, model_text, "tester") as ws:
        import_timelines(ws, write_csv(tmp_path / "g.csv", generated_rows(120, 4, rng)), "tester")
    return path


NEEDS_UNSHARE = pytest.mark.skipif(not _unshare_works(),
                                   reason="needs unshare -rm (user and mount namespaces) for a small tmpfs")


@NEEDS_UNSHARE
def test_exports_backup_and_import_on_a_full_disk(big_ws, tmp_path, model_text, rng):
    small = tmp_path / "small"
    _full_disk(big_ws, tmp_path, model_text, rng, [
        ["export", str(big_ws), "--out", f"{small}/t.csv"],
        ["export", str(big_ws), "--out", f"{small}/t.xlsx"],   # printed tracebacks before
        ["backup", str(big_ws), f"{small}/copy.bak"],
    ])


@pytest.mark.slow
@NEEDS_UNSHARE
def test_scores_and_reports_on_a_full_disk(big_ws, tmp_path, model_text, rng):
    small = tmp_path / "small"
    _full_disk(big_ws, tmp_path, model_text, rng, [
        ["score", str(big_ws), "--as-of", "2025-06-01", "--out", f"{small}/scores.csv"],
        ["report", str(big_ws), "--as-of", "2025-06-01", "--out", f"{small}/r.pdf"],
        ["report", str(big_ws), "--as-of", "2025-06-01", "--out", f"{small}/r.xlsx"],
    ])


def _full_disk(big_ws, tmp_path, model_text, rng, writers):
    small, room = tmp_path / "small", tmp_path / "room"
    small.mkdir()
    room.mkdir()
    more = write_csv(tmp_path / "more.csv", generated_rows(150, 3, rng))
    commands = writers + [
        ["init", f"{room}/w.cvw", "--model", str(tmp_path.parent / "model.json")],
        ["FILL"],
        ["import", f"{room}/w.cvw", str(more)],
    ]
    (tmp_path.parent / "model.json").write_text(model_text, encoding="utf-8")
    with Workspace.open(big_ws) as ws:
        before = ws.audit_head()
    mount = (f"mount -t tmpfs -o size=8k none '{small}' && mount -t tmpfs -o size=1m none '{room}' && "
             "exec \"$@\"")
    run = subprocess.run(["unshare", "-rm", "sh", "-c", mount, "sh", sys.executable, "-c", _RUNNER,
                          json.dumps(commands), str(room)], capture_output=True, text=True, timeout=600,
                         env=dict(os.environ, PYTHONPATH=os.pathsep.join(sys.path)))
    assert run.returncode == 0, run.stderr
    results = json.loads(run.stdout.strip().splitlines()[-1])
    for (name, code, err, left), argv in zip(results, [c for c in commands if c != ["FILL"]]):
        if name == "init":
            assert code == 0, err  # the new workspace fits; the import after FILL cannot
            continue
        assert code != 0, (argv, err)
        assert "Traceback" not in err and len(err.strip().splitlines()) == 1, (argv, err)
        assert "disk is full" in err, (argv, err)
        assert not any("partial" in f for f in left), (argv, left)
    assert set(results[-1][3]) <= {"filler", "w.cvw", "w.cvw-wal", "w.cvw-shm"}
    with Workspace.open(big_ws) as ws:  # nothing recorded for writes that did not happen
        assert ws.audit_head() == before


def test_full_disk_at_the_write_helper(big_ws, tmp_path, monkeypatch, capsys):
    """The same promise without a small disk: the helper's file system error becomes one line."""
    from caseview.cli.main import main

    real_open = open

    def full(path, mode="r", *args, **kwargs):
        if ".partial-" in str(path) and "w" in mode:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_open(path, mode, *args, **kwargs)

    monkeypatch.setattr("builtins.open", full)
    code = main(["score", str(big_ws), "--as-of", "2025-06-01", "--out", str(tmp_path / "scores.csv")])
    err = capsys.readouterr().err
    assert code != 0 and "disk is full" in err and len(err.strip().splitlines()) == 1
    assert not any("partial" in p.name or p.name == "scores.csv" for p in tmp_path.iterdir())
