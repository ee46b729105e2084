"""One case rescored: the risk queue and the caseload table change one row, and end up exactly as a
full refill would leave them (issue 15 item 1: the new estimate on screen within 100 ms at 100,000
cases, so neither view may sort or count the whole caseload again)."""

from __future__ import annotations

import numpy as np
import pytest

from caseview.followup import assess_scores, default_rules
from caseview.followup.queue import QUEUE_STATUSES, counts_by_coordinator, overdue_mask, queue_rows
from caseview.gui.caseload_model import CaseloadTableModel
from caseview.gui.data_source import LoadedCaseload
from caseview.dates import to_day
from caseview.scoring import score_loaded

from .conftest import open_ws
from .standin import AS_OF, make_caseload

pytestmark = pytest.mark.gui

REVIEWS = ("", "", "acknowledged", "actioned", "dismissed")


@pytest.fixture
def half_flagged(demo_model, rng):
    """600 cases, about half flagged, some reviewed, a few with tied priorities."""
    caseload = make_caseload(demo_model, 600, rng)
    scores = score_loaded(caseload, demo_model, to_day(AS_OF), 90.0)
    threshold = float(np.median(scores.p_follow_up_now))
    a = assess_scores(scores, default_rules().with_changes([f"in_follow_up_now.threshold={threshold}"]),
                      explain_reasons=False)
    a.review_status[np.flatnonzero(a.is_flagged)[::5]] = "acknowledged"
    a.priority[10:20] = a.priority[10]  # ties are ordered by case ID
    return LoadedCaseload(scores, a, [])


def _change_one_case(loaded, row, rng):
    """What a rescore of one case can change: its flag, priority, review, due day, estimate, coordinator."""
    a, s = loaded.assessment, loaded.scores
    a.is_flagged[row] = rng.random() < 0.6
    a.flags[row] = "in_follow_up_now" if a.is_flagged[row] else ""
    others = a.priority[rng.integers(0, s.n_cases)]
    a.priority[row] = others if rng.random() < 0.2 else rng.random()  # sometimes tied with another case
    a.review_status[row] = REVIEWS[rng.integers(len(REVIEWS))] if a.is_flagged[row] else ""
    a.next_contact_due_day[row] = s.as_of_day + int(rng.integers(-30, 30))
    s.p_follow_up_now[row] = s.p_reach_follow_up[row] = rng.random()
    s.last_contact_day[row] = s.as_of_day - int(rng.integers(0, 5))
    s.days_since_contact[row] = s.as_of_day - s.last_contact_day[row]
    if rng.random() < 0.2:
        s.coordinators[row] = f"C{rng.integers(1, 5)}"


def _counts_shown(queue):
    table = queue.by_coordinator
    return {table.item(i, 0).data(256): [int(table.item(i, j).text().replace(",", ""))
                                         for j in range(1, table.columnCount())] for i in range(table.rowCount())}


def test_queue_changes_one_row_and_equals_a_full_refill(window, qtbot, half_flagged, rng):
    queue = window.risk_queue
    queue.set_caseload(half_flagged)
    resets = []
    queue.model.modelReset.connect(lambda: resets.append(1))
    a = half_flagged.assessment
    filters = [(None, None, False), ("C2", None, False), (None, "new", False), (None, None, True)]
    incremental = 0
    for step in range(120):
        if step % 30 == 0:  # another filter: a refill (then back to one-row updates)
            coordinator, status, overdue = filters[step // 30]
            queue.coordinator.setCurrentIndex(max(0, queue.coordinator.findData(coordinator or "*")))
            queue.status.setCurrentIndex(max(0, queue.status.findData(status or "*")))
            queue.overdue_only.setChecked(overdue)
        row = int(rng.integers(0, half_flagged.scores.n_cases))
        if step % 3 == 0 and queue.rows.size:
            queue.table.selectRow(queue.model.view_row_of(int(queue.rows[rng.integers(queue.rows.size)])))
        selected_case = queue.selected_row()
        before = queue.case_state(row)
        _change_one_case(half_flagged, row, rng)
        resets.clear()
        queue.update_case(LoadedCaseload(half_flagged.scores, a, []), row, before)
        incremental += not resets
        coordinator, status = queue.coordinator.currentData(), queue.status.currentData()
        expected = queue_rows(a, None if coordinator == "*" else coordinator, None if status == "*" else status,
                              queue.overdue_only.isChecked())
        assert np.array_equal(queue.rows, expected), step
        shown = queue.model
        assert [shown.data(shown.index(i, 0)) for i in range(shown.rowCount())] == \
            [str(c) for c in a.scores.case_ids[expected]]
        counts = {c.coordinator: [c.by_status[s] for s in QUEUE_STATUSES] + [c.overdue]
                  for c in counts_by_coordinator(a)}
        assert _counts_shown(queue) == counts
        assert f"{int(overdue_mask(a).sum())} overdue flag" in queue.overdue.text()
        if selected_case >= 0 and selected_case != row and expected.size:
            assert queue.selected_row() == selected_case  # the selection stays on its case
    assert incremental >= 100  # one-row updates, not refills (a coordinator appearing or going refills)


@pytest.mark.parametrize("column", [-1, 0, 1, 2, 3, 5, 7, 8, 9])
def test_table_moves_one_row_and_equals_a_full_sort(qapp, half_flagged, rng, column):
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QTableView

    def refilled():
        model = CaseloadTableModel()
        model.set_caseload(half_flagged)
        model.sort(column, Qt.DescendingOrder if column in (-1, 5) else Qt.AscendingOrder)
        model.set_filters(flagged_only=column == 8)  # re-sorted from the row order: ties in row order
        return model

    model = refilled()
    view = QTableView()
    view.setModel(model)
    resets, moves = [], []
    model.modelReset.connect(lambda: resets.append(1))
    model.layoutChanged.connect(lambda: resets.append(1))
    model.rowsMoved.connect(lambda *_: moves.append(1))
    for _ in range(40):
        row = int(rng.choice(model.order))
        view.selectRow(int(np.flatnonzero(model.order == row)[0]))
        _change_one_case(half_flagged, row, rng)
        resets.clear()
        if model.update_case(half_flagged, row):
            assert not resets  # no reset, no layout change of the whole table
            assert np.array_equal(model.order, refilled().order)
            selected = view.selectionModel().selectedRows()
            assert [model.case_row(i.row()) for i in selected] == [row]  # the selection followed the row
            position = int(np.flatnonzero(model.order == row)[0])
            assert model.data(model.index(position, 0)) == str(half_flagged.scores.case_ids[row])
        else:  # the filter now hides or shows it: the caller refills
            model.set_caseload(half_flagged)
            assert np.array_equal(model.order, refilled().order)
    assert moves or column == 0  # case IDs do not change: sorted by case, nothing moves


def test_recording_contacts_in_the_window_keeps_both_views_true(window, qtbot, workspace_path):
    from caseview.errors import InputError
    from caseview.gui.caseload_model import P_NOW
    from caseview.operations import casework

    loaded = open_ws(window, qtbot, workspace_path)
    window.caseload.model.sort(P_NOW)
    window.caseload.model.set_filters()
    ws = window.workspace()
    resets = []
    window.risk_queue.model.modelReset.connect(lambda: resets.append("queue"))
    window.caseload.model.modelReset.connect(lambda: resets.append("table"))
    done = 0
    for case_id in [str(c) for c in loaded.scores.case_ids[::9]]:
        try:
            casework.record_contact(ws, case_id, AS_OF, "tester", values={"concern": "serious", "falls": "several"})
        except InputError:
            continue
        window.casework.after_change(case_id)
        done += 1
        a = window.loaded.assessment
        assert np.array_equal(window.risk_queue.rows, queue_rows(a))
        table = window.caseload.model
        assert np.array_equal(table.order, table._sorted(np.flatnonzero(table._compute_mask())))
        row = window.loaded.scores.row_of(case_id)
        view_row = table.view_row_of_case(case_id)
        assert table.data(table.index(view_row, P_NOW)) == f"{window.loaded.scores.p_follow_up_now[row] * 100:.0f}%"
    assert done >= 5
    assert resets.count("table") == 0 and resets.count("queue") <= 2  # a coordinator new to the queue refills
