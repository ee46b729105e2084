"""A report's file name reaches the append-only audit trail only when it cannot hold an identifier
(the rule exports and imports use, issue 12 item 6); ``--by`` is one line (item 7); the
``--coordinator`` filter reads a typed code like an imported one."""

from __future__ import annotations

import hashlib
import shutil

import pytest

from caseview.cli.main import main
from caseview.storage import Workspace
from reports_helpers import AS_OF


@pytest.fixture
def workspace_copy(report_workspace, tmp_path):
    path = tmp_path / "copy.cvw"
    shutil.copy(report_workspace, path)
    return path


@pytest.mark.parametrize("name", ["Mary Smith visits.csv", "call 07700 900123.csv"])
def test_report_file_name_that_may_hold_an_identifier_is_withheld(workspace_copy, tmp_path, capsys, name):
    out = tmp_path / name
    code = main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out), "--by", "sup-2"])
    capsys.readouterr()
    assert code == 0 and out.exists()
    with Workspace.open(workspace_copy) as ws:
        entry = ws.audit_entries()[-1]
    digest = hashlib.sha256(out.read_bytes()).hexdigest()
    assert entry.action == "report.create"
    assert entry.target == f"file {digest[:12]}.csv (name withheld)"
    stem = name.rsplit(".", 1)[0]
    assert all(stem not in str(v) for v in (entry.target, entry.details))


def test_plain_report_file_name_is_kept(workspace_copy, tmp_path, capsys):
    out = tmp_path / "team_summary.csv"
    assert main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out)]) == 0
    capsys.readouterr()
    with Workspace.open(workspace_copy) as ws:
        assert ws.audit_entries()[-1].target == "team_summary.csv"


def test_report_by_with_a_line_break_is_refused(workspace_copy, tmp_path, capsys):
    out = tmp_path / "summary.csv"
    code = main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out),
                 "--by", "sup\n1 2026-01-01 forged"])
    err = capsys.readouterr().err
    assert code != 0 and "--by" in err and "control character" in err and not out.exists()


def test_report_coordinator_filter_reads_a_typed_code(workspace_copy, tmp_path, capsys):
    with Workspace.open(workspace_copy) as ws:
        model, _ = ws.current_model()
        stored = sorted({str(c) for c in ws.load_caseload(model).coordinators if c})[0]
    out = tmp_path / "mine.csv"
    code = main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out),
                 "--coordinator", f" {stored.lower()}\u200b"])
    err = capsys.readouterr().err
    assert code == 0, err
    with Workspace.open(workspace_copy) as ws:
        assert ws.audit_entries()[-1].details["options"]["coordinator"] == stored
