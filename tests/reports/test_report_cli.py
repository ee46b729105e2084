"""``caseview report``: formats from the extension, audit entry, one-line errors, nothing half-written."""

from __future__ import annotations

import hashlib
import shutil

import pytest

from caseview import ADVISORY_NOTICE
from reports_helpers import AS_OF


@pytest.fixture
def workspace_copy(report_workspace, tmp_path):
    path = tmp_path / "copy.cvw"
    shutil.copy(report_workspace, path)
    return path


def test_cli_csv_report_is_audited(workspace_copy, tmp_path, capsys):
    from caseview.cli.main import main
    from caseview.storage import Workspace

    out = tmp_path / "summary.csv"
    code = main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out), "--by", "sup-2",
                 "--horizon", "60"])
    printed = capsys.readouterr().out
    assert code == 0 and out.exists()
    with Workspace.open(workspace_copy) as ws:
        entry = ws.audit_entries()[-1]
        head = ws.audit_head()
        previous = ws.audit_entries()[-2].entry_hash
        assert ws.audit_verify().ok
    assert (entry.actor, entry.action, entry.target) == ("sup-2", "report.create", "summary.csv")
    assert entry.details["format"] == "csv" and entry.details["as_of"] == AS_OF.isoformat()
    assert entry.details["options"]["horizon_days"] == 60.0
    assert entry.details["sha256"] == hashlib.sha256(out.read_bytes()).hexdigest()
    assert f"audit chain head in the report: {previous}" in printed
    assert f"report recorded as audit entry {entry.id}; audit chain head now: {head}" in printed
    assert ADVISORY_NOTICE in printed


@pytest.mark.parametrize("args, message", [
    (["--out", "{tmp}/r.docx"], "expected a file name ending in .pdf, .xlsx or .csv"),
    (["--out", "{tmp}/r.csv", "--since", "2026-12-31"], "changes since: expected a date before the as-of date"),
    (["--out", "{tmp}/r.csv", "--coordinator", "C9"], "no coordinator 'C9'"),
    (["--out", "{tmp}/r.csv", "--horizon", "-5"], "horizon: expected a number of days > 0"),
])
def test_cli_errors_are_one_line_and_change_nothing(workspace_copy, tmp_path, capsys, args, message):
    from caseview.cli.main import main
    from caseview.storage import Workspace

    with Workspace.open(workspace_copy) as ws:
        before = ws.audit_head()
    argv = ["report", str(workspace_copy), "--as-of", AS_OF.isoformat()] + [a.format(tmp=tmp_path) for a in args]
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2
    assert message in err and "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["copy.cvw"]     # no report, no temporary file
    with Workspace.open(workspace_copy) as ws:
        assert ws.audit_head() == before


def test_build_report_result_and_progress(workspace_copy, tmp_path):
    from caseview.reports import build_report
    from caseview.storage import Workspace

    seen = []
    with Workspace.open(workspace_copy) as ws:
        before = ws.audit_head()
        result = build_report(ws, AS_OF.isoformat(), tmp_path / "book.xlsx", actor="t", callback=seen.append)
        assert result.audit_head == before and result.entry_hash == ws.audit_head()
    assert result.format == "xlsx" and result.n_rows == result.count > 0 and result.n_pages is None
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)


def test_cancel_from_callback_leaves_nothing(workspace_copy, tmp_path):
    from caseview.errors import Cancelled
    from caseview.reports import build_report
    from caseview.storage import Workspace

    def cancel(fraction):
        if fraction > 0.5:
            raise Cancelled()

    with Workspace.open(workspace_copy) as ws:
        before = ws.audit_head()
        with pytest.raises(Cancelled):
            build_report(ws, AS_OF, tmp_path / "r.pdf", actor="t", callback=cancel)
        assert ws.audit_head() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["copy.cvw"]


def test_head_printed_on_the_terminal_is_the_head_inside_the_report(workspace_copy, tmp_path, capsys):
    """Issue 12, item 2: the chain head a reader finds in the workbook is the one the command printed."""
    from openpyxl import load_workbook

    from caseview.cli.main import main

    out = tmp_path / "book.xlsx"
    assert main(["report", str(workspace_copy), "--as-of", AS_OF.isoformat(), "--out", str(out), "--by", "t"]) == 0
    printed = capsys.readouterr().out
    book = load_workbook(out, read_only=True)
    inside = [row[1] for sheet in book.worksheets for row in sheet.iter_rows(values_only=True)
              if row and row[0] == "audit_chain_head"]
    assert len(inside) == 1 and len(inside[0]) == 64
    assert f"audit chain head in the report: {inside[0]}" in printed
    assert oct(out.stat().st_mode & 0o777) == oct(0o600)  # item 8: owner-only
