"""Files holding case data are owner-only from creation and never left half-written (issue 12, item 8)."""

from __future__ import annotations

import os
import signal
import stat
import subprocess
import sys
import time

import pytest

from caseview.storage import Workspace
from caseview.timeline_io import export_timelines, import_timelines


@pytest.fixture(autouse=True)
def usual_umask():
    old = os.umask(0o022)  # the usual umask: files would be world-readable (0644) unless made 0600
    yield
    os.umask(old)


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def test_workspace_and_its_wal_and_shm_are_owner_only(tmp_path, model_text, small_csv):
    path = tmp_path / "team.cvw"
    with Workspace.create(path, model_text, "tester") as ws:
        import_timelines(ws, small_csv, "tester")
        assert _mode(path) == 0o600
        for suffix in ("-wal", "-shm"):
            assert os.path.exists(str(path) + suffix) and _mode(str(path) + suffix) == 0o600, suffix


def test_backup_export_score_and_flag_files_are_owner_only(filled_path, tmp_path):
    from caseview.cli.main import main

    out = tmp_path / "out"
    out.mkdir()
    assert main(["backup", str(filled_path), str(out / "copy.bak")]) == 0
    assert main(["export", str(filled_path), "--out", str(out / "timelines.csv")]) == 0
    assert main(["export", str(filled_path), "--out", str(out / "timelines.xlsx")]) == 0
    assert main(["score", str(filled_path), "--as-of", "2025-06-01", "--out", str(out / "scores.csv")]) == 0
    assert main(["flags", str(filled_path), "--as-of", "2025-06-01", "--out", str(out / "flags.csv")]) == 0
    assert main(["history", str(filled_path), "HS-0001", "--out", str(out / "history.csv")]) == 0
    made = sorted(p.name for p in out.iterdir())
    assert made == ["copy.bak", "flags.csv", "history.csv", "scores.csv", "timelines.csv", "timelines.xlsx"]
    assert {name: _mode(out / name) for name in made} == {name: 0o600 for name in made}


@pytest.fixture
def filled_path(ws, small_csv):
    import_timelines(ws, small_csv, "tester")
    path = ws.path
    ws.close()
    return path


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_failed_export_leaves_no_partial_file_and_no_entry(filled_path, tmp_path, monkeypatch, suffix):
    from caseview.timeline_io import exporter

    def broken(table, path):
        with open(path, "wb") as fh:
            fh.write(b"half of the caseload")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(exporter, "_write_xlsx", broken)
    monkeypatch.setattr("pandas.DataFrame.to_csv", lambda self, path, **k: broken(self, path))
    out = tmp_path / "out"
    out.mkdir()
    with Workspace.open(filled_path) as ws:
        before = ws.audit_head()
        from caseview.errors import InputError

        with pytest.raises(InputError, match="disk is full"):
            export_timelines(ws, out / f"t{suffix}", "tester")
        assert ws.audit_head() == before
    assert list(out.iterdir()) == []


_SLOW_EXPORT = """
import sys, time, os, stat
from caseview.timeline_io import exporter
def slow(table, path):
    with open(path, "wb") as fh:
        fh.write(b"part of the caseload")
        fh.flush()
        print("MODE", oct(stat.S_IMODE(os.stat(path).st_mode)), flush=True)
        time.sleep(60)
exporter._write_xlsx = slow
from caseview.cli.main import main
sys.exit(main(["export", sys.argv[1], "--out", sys.argv[2]]))
"""


def test_terminated_export_removes_its_partial_file(filled_path, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_EXPORT, str(filled_path), str(out / "t.xlsx")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    line = proc.stdout.readline()  # the partial file exists and holds data now
    assert line.strip() == "MODE 0o600", line + proc.stderr.read()
    assert len(list(out.iterdir())) == 1
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130 and "Traceback" not in err
    assert list(out.iterdir()) == []
    with Workspace.open(filled_path) as ws:
        assert not any(e.action == "export" for e in ws.audit_entries())


def test_output_to_a_pipe_or_device_writes_into_it_and_leaves_it_in_place(filled_path, tmp_path, capsys):
    """``--out /dev/null`` (or a named pipe) must not be replaced by a regular file.

    A named pipe in the test folder stands in for /dev/null, so a failing run cannot damage the machine.
    """
    import threading

    from caseview.cli.main import main

    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    received = []
    reader = threading.Thread(target=lambda: received.append(pipe.read_bytes()), daemon=True)
    reader.start()
    code = main(["score", str(filled_path), "--as-of", "2025-06-01", "--out", str(pipe)])
    if reader.is_alive():  # the command never opened the pipe: unblock the reader before failing
        with open(pipe, "wb"):
            pass
    reader.join(10)
    assert code == 0, capsys.readouterr().err
    assert stat.S_ISFIFO(os.lstat(pipe).st_mode), "the pipe was replaced by a regular file"
    assert received and received[0].startswith(b"case_id")


def test_output_to_a_folder_is_a_one_line_error_and_the_folder_is_untouched(filled_path, tmp_path, capsys):
    from caseview.cli.main import main

    folder = tmp_path / "reports"
    folder.mkdir()
    (folder / "keep.txt").write_text("kept")
    code = main(["score", str(filled_path), "--as-of", "2025-06-01", "--out", str(folder)])
    err = capsys.readouterr().err
    assert code != 0
    assert "is a folder" in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert (folder / "keep.txt").read_text() == "kept" and sorted(p.name for p in folder.iterdir()) == ["keep.txt"]
