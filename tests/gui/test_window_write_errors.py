"""A write that fails in the window is never silent (issue 12, item 1: an Acknowledge click did nothing)."""

from __future__ import annotations

import sqlite3

import pytest

from .conftest import open_ws

pytestmark = pytest.mark.gui


def test_failing_review_write_is_shown_and_stores_nothing(window, qtbot, workspace_path, monkeypatch):
    open_ws(window, qtbot, workspace_path)
    queue = window.risk_queue
    queue.table.selectRow(0)
    case_id = queue.model.text(queue.rows[0], 0)  # the queue is a table model (no 500-row cap)
    before = len(window.workspace().audit_entries())

    def damaged(*args, **kwargs):  # what SQLite raised in the reported session
        raise sqlite3.DatabaseError("database disk image is malformed")

    from caseview.storage import followup_store

    monkeypatch.setattr(followup_store, "insert_review", damaged)
    shown = []
    monkeypatch.setattr(window, "show_error", shown.append)
    assert queue.review_selected("acknowledged", note="seen") is False
    assert shown and "malformed" in shown[0] and "nothing was changed" in shown[0]
    assert len(window.workspace().audit_entries()) == before  # the audit entry rolled back with the review
    assert window.caseload.model.data(window.caseload.model.index(
        window.caseload.model.view_row_of_case(case_id), 9)) != "acknowledged"


def test_import_dialog_does_not_open_the_workspace_file_itself(window, qtbot, workspace_path, monkeypatch):
    """Previewing the workspace as a timeline file would open() it and drop the window's SQLite locks."""
    from caseview.gui import import_dialog

    open_ws(window, qtbot, workspace_path)
    dialog = import_dialog.ImportDialog(window.source, "tester", window)
    qtbot.addWidget(dialog)
    monkeypatch.setattr(import_dialog, "read_preview", lambda *a: pytest.fail("the workspace file was opened"))
    dialog.load_file(window.workspace().path)
    assert "workspace file itself" in dialog.summary.text()


def test_a_job_without_a_failure_handler_still_reports(window, qtbot, monkeypatch):
    shown = []
    monkeypatch.setattr(window, "show_error", shown.append)

    def failing(callback):
        raise sqlite3.DatabaseError("database disk image is malformed")

    job = window.jobs.start("write", failing)
    qtbot.waitUntil(lambda: bool(job.is_done and shown), timeout=10000)
    assert "malformed" in shown[0]
