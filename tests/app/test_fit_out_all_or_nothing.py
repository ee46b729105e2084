"""``fit --out`` never saves a new model version and then fails on the file (issue 12, item 9)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

from caseview.cli.main import main
from caseview.storage import Workspace
from caseview.timeline_io import import_timelines

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "storage"))
from storage_helpers import DEMO_MODEL_PATH, generated_rows, write_csv  # noqa: E402


@pytest.fixture
def small_ws(tmp_path, rng):
    path = tmp_path / "w.cvw"
    with Workspace.create(path, DEMO_MODEL_PATH.read_text(encoding="utf-8"), "t") as ws:
        import_timelines(ws, write_csv(tmp_path / "g.csv", generated_rows(12, 4, rng)), "t")
    return path


def _versions(path):
    with Workspace.open(path) as ws:
        return [v.id for v in ws.model_versions()]


def test_unwritable_out_is_refused_before_fitting(small_ws, tmp_path, capsys, monkeypatch):
    import hmm.fitting

    monkeypatch.setattr(hmm.fitting, "fit_model", lambda *a, **k: pytest.fail("fitted before checking --out"))
    code = main(["fit", str(small_ws), "--out", str(tmp_path / "no such folder" / "m.json")])
    err = capsys.readouterr().err
    assert code == 2 and "folder does not exist" in err and len(err.strip().splitlines()) == 1
    assert _versions(small_ws) == [1]


def test_failed_out_write_keeps_no_new_version(small_ws, tmp_path, capsys, monkeypatch):
    import caseview.modelfile
    from caseview.errors import InputError

    def full(*args, **kwargs):
        raise InputError(f"{tmp_path / 'm.json'}: cannot write: the disk is full (no space left on device)")

    monkeypatch.setattr(caseview.modelfile, "save_model", full)
    code = main(["fit", str(small_ws), "--out", str(tmp_path / "m.json"), "--starts", "1", "--max-iterations", "3"])
    err = capsys.readouterr().err
    assert code == 2 and "disk is full" in err, err
    assert _versions(small_ws) == [1]  # the fitted version was rolled back with the failed file
    with Workspace.open(small_ws) as ws:
        assert not any(e.action == "model.fit" for e in ws.audit_entries()) and ws.audit_verify().ok
