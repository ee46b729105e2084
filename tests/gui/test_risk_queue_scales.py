"""Supervisor queue that scales (issue 15 item 7): every flagged case listed (no cap), unreviewed
first, filters by coordinator and review status, the overdue count clickable, review notes shown."""

from __future__ import annotations

import time

import numpy as np
import pytest
from PySide6.QtCore import Qt

from caseview.followup import assess_scores, default_rules
from caseview.followup.queue import overdue_mask, queue_status
from caseview.gui.data_source import LoadedCaseload
from caseview.gui.risk_queue_model import NEXT_DUE, NOTE, REVIEW
from caseview.dates import to_day
from caseview.scoring import score_loaded

from .conftest import open_ws
from .standin import AS_OF, make_caseload

pytestmark = pytest.mark.gui


@pytest.fixture
def many_flags(demo_model, rng):
    """3,000 cases, every one flagged (threshold 0), some reviewed: far more than any screenful."""
    caseload = make_caseload(demo_model, 3000, rng)
    scores = score_loaded(caseload, demo_model, to_day(AS_OF), 90.0)
    rules = default_rules().with_changes(["in_follow_up_now.threshold=0"])
    a = assess_scores(scores, rules, explain_reasons=False)
    reviewed = np.arange(0, 3000, 7)
    a.review_status[reviewed] = "acknowledged"
    a.review_note[reviewed] = "spoke to the family"
    return LoadedCaseload(scores, a, [])


def test_every_flagged_case_is_listed_new_ones_first(window, qtbot, many_flags):
    queue = window.risk_queue
    start = time.perf_counter()
    queue.set_caseload(many_flags)
    seconds = time.perf_counter() - start
    a = many_flags.assessment
    model = queue.model
    assert model.rowCount() == 3000 == int(a.is_flagged.sum())      # the old queue stopped at 500
    assert "3,000 flagged cases" in queue.heading.text() and "all of them" in queue.heading.text()
    status = [model.data(model.index(i, REVIEW)) for i in range(model.rowCount())]
    first_reviewed = status.index("acknowledged")
    assert set(status[:first_reviewed]) == {"new"} and set(status[first_reviewed:]) == {"acknowledged"}
    last = model.rowCount() - 1
    assert model.data(model.index(last, NOTE)) == "spoke to the family"
    queue.table.scrollToBottom()
    queue.table.selectRow(last)
    assert queue.selected_row() == int(queue.rows[last])
    assert "spoke to the family" in queue.reasons.text()
    assert seconds < 2.0, seconds  # an index array, not 3,000 rows of widgets


def test_filters_by_coordinator_and_review_status(window, qtbot, many_flags):
    queue = window.risk_queue
    queue.set_caseload(many_flags)
    s = many_flags.scores
    queue.coordinator.setCurrentIndex(queue.coordinator.findData("C2"))
    assert queue.model.rowCount() == int((s.coordinators == "C2").sum()) > 0
    assert (s.coordinators[queue.rows] == "C2").all()
    queue.status.setCurrentIndex(queue.status.findData("acknowledged"))
    statuses = queue_status(many_flags.assessment)[queue.rows]
    assert queue.model.rowCount() > 0 and set(statuses) == {"acknowledged"}
    assert (s.coordinators[queue.rows] == "C2").all()
    # a coordinator's row in the supervisor table lists that coordinator
    table = queue.by_coordinator
    c3 = next(i for i in range(table.rowCount()) if table.item(i, 0).text() == "C3")
    queue.status.setCurrentIndex(0)
    table.cellClicked.emit(c3, 0)
    assert queue.coordinator.currentData() == "C3" and (s.coordinators[queue.rows] == "C3").all()


def test_overdue_count_is_a_link_into_the_list(window, qtbot, many_flags):
    queue = window.risk_queue
    queue.set_caseload(many_flags)
    expected = int(overdue_mask(many_flags.assessment).sum())
    assert expected > 0
    assert f"{expected:,} overdue flag" in queue.overdue.text() and "<a href" in queue.overdue.text()
    queue.overdue.linkActivated.emit("overdue")
    assert queue.overdue_only.isChecked() and queue.model.rowCount() == expected
    texts = {queue.model.data(queue.model.index(i, NEXT_DUE)) for i in range(queue.model.rowCount())}
    assert all(t.startswith("overdue by") or t == "due today" for t in texts)


def test_review_note_shown_in_queue_table_and_case_pane(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    queue = window.risk_queue
    queue.table.selectRow(0)
    r = queue.selected_row()
    case_id = str(window.loaded.scores.case_ids[r])
    queue.note.setText("phoned, visit booked for Friday")
    assert queue.review_selected("acknowledged")
    i = queue.model.view_row_of(r)
    assert queue.model.data(queue.model.index(i, NOTE)) == "phoned, visit booked for Friday"
    assert "phoned, visit booked for Friday" in queue.reasons.text()
    model = window.caseload.model
    row = model.view_row_of_case(case_id)
    assert model.data(model.index(row, 9), Qt.ToolTipRole) == "Review note: phoned, visit booked for Friday"
    # double click: the window shows the case, its pane has the note
    queue.open_case_requested.emit(case_id)
    assert window.tabs.currentIndex() == 0 and window.case_view.case_id == case_id
    assert "phoned, visit booked for Friday" in window.case_view.why.text()
    # after a rescore the note comes back from storage
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.rescore()
    a = window.loaded.assessment
    assert a.review_note[a.scores.row_of(case_id)] == "phoned, visit booked for Friday"


def test_loading_never_writes_reopening_is_an_explicit_step(window, qtbot, workspace_path):
    from caseview.followup import record_review
    from caseview.storage import Workspace

    # a flagged case dismissed when its chance was far lower (as of its first contact)
    with Workspace.open(workspace_path) as ws:
        from caseview.followup import assess_caseload

        a = assess_caseload(ws, AS_OF, 90.0, reopen=False, explain_reasons=False)
        r = int(np.argmax(a.scores.p_follow_up_now))
        case_id = str(a.scores.case_ids[r])
        early = a.scores.first_contact_day[r]
        from caseview.dates import from_day

        record_review(ws, case_id, "acknowledged", "looked", "sup", None, from_day(int(early)))
        row = record_review(ws, case_id, "dismissed", "family visiting daily", "sup", None, from_day(int(early)))
        assert row.p_follow_up is not None and a.scores.p_follow_up_now[r] - row.p_follow_up >= 0.15
        entries_before = len(ws.audit_entries())
    loaded = open_ws(window, qtbot, workspace_path)
    assert len(window.workspace().audit_entries()) == entries_before          # loading wrote nothing
    assert loaded.assessment.review_status[loaded.scores.row_of(case_id)] == "dismissed"
    queue = window.risk_queue
    assert [c[0] for c in loaded.reopen_candidates] == [case_id]
    assert not queue.reopen_button.isHidden() and "Re-open 1 dismissed flag " in queue.reopen_button.text()
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        queue.reopen_button.click()
    entries = window.workspace().audit_entries()
    assert len(entries) == entries_before + 1 and entries[-1].action == "review.reopened"
    a = window.loaded.assessment
    assert a.review_status[a.scores.row_of(case_id)] == "new" and queue.reopen_button.isHidden()
