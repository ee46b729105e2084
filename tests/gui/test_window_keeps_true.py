"""The window keeps itself true (issue 15 item 5): the case pane follows its case's data and the
as-of date, search selects, a filter that hides the case clears the pane, header clicks reverse,
and the as-of field rescores when editing finishes."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from PySide6.QtCore import QPoint, Qt
from PySide6.QtWidgets import QDateTimeEdit

from caseview.gui.caseload_model import CASE, COORDINATOR, DAYS_SINCE
from caseview.dates import from_day

from .conftest import open_ws
from .test_window import column_values, load

pytestmark = pytest.mark.gui


def test_case_pane_shows_the_new_estimate_after_an_import(window, qtbot, workspace_path, tmp_path):
    from caseview.timeline_io import import_timelines

    open_ws(window, qtbot, workspace_path)
    scores = window.loaded.scores
    row = int(np.argmin(scores.p_follow_up_now))   # a calm case: a bad contact will move it
    case_id = str(scores.case_ids[row])
    assert window.caseload.select_case(case_id)
    assert window.case_view.data.case_id == case_id
    old_p = float(scores.p_follow_up_now[row])
    new_day = window.as_of.isoformat()
    csv = tmp_path / "one.csv"
    csv.write_text("case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme\n"
                   f"{case_id},{new_day},{scores.coordinators[row]},unable,several,serious,1,0\n", encoding="utf-8")
    import_timelines(window.workspace(), csv, "tester")
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.rescore()
    new_scores = window.loaded.scores
    new_row = new_scores.row_of(case_id)
    assert new_scores.p_follow_up_now[new_row] > old_p + 0.05   # the table row changed ...
    view = window.case_view
    assert view.scores is new_scores and view.row == new_row      # ... and the pane follows it
    assert view.data.case_id == case_id and int(view.data.contact_days[-1]) == new_scores.as_of_day
    assert new_day in view.title.text() and view.contacts.rowCount() == int(new_scores.n_contacts[new_row])
    a = window.loaded.assessment
    assert "Next contact due:" in view.why.text()
    if a.is_flagged[new_row]:   # the plain reason sentences of this run, not the last one
        assert "in a follow-up stage" in view.why.text() and "The contact on " + new_day in view.why.text()


def test_case_pane_follows_the_as_of_date(window, qtbot, standin):
    load(window, qtbot, standin)
    case_id = window.caseload.current_case_id()
    window.as_of_edit.setDate(window.as_of_edit.date().addDays(30))
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.as_of_edit.editingFinished.emit()
    assert window.case_view.data.case_id == case_id
    assert window.case_view.data.as_of_day == window.loaded.scores.as_of_day
    assert from_day(window.case_view.data.as_of_day) == window.as_of


def test_refresh_case_entry_point(window, qtbot, standin):
    load(window, qtbot, standin)
    case_id = str(window.loaded.scores.case_ids[5])
    assert window.case_view.refresh_case(case_id)
    assert window.case_view.data.case_id == case_id
    assert not window.case_view.refresh_case("NO-SUCH-CASE")
    assert window.case_view.data is None and "Select a case" in window.case_view.title.text()


def test_search_selects_the_match(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    target = str(loaded.scores.case_ids[137])
    window.caseload.search.clear()
    qtbot.keyClicks(window.caseload.search, target.lower())
    assert window.caseload.current_case_id() == target
    assert window.case_view.data.case_id == target


def test_filter_that_hides_the_selected_case_clears_the_pane(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    selected = window.caseload.current_case_id()
    mine = loaded.scores.coordinators[loaded.scores.row_of(selected)]
    other = next(c for c in sorted(set(loaded.scores.coordinators)) if c != mine)
    combo = window.caseload.coordinator
    combo.setCurrentIndex(combo.findData(other))
    assert window.caseload.current_case_id() is None
    assert window.case_view.data is None and window.case_view.row == -1
    assert "Select a case" in window.case_view.title.text()
    assert window.case_view.contacts.rowCount() == 0
    assert set(column_values(window.caseload.model, COORDINATOR)) == {other}


def _click_header(qtbot, header, column):
    x = header.sectionViewportPosition(column) + header.sectionSize(column) // 2
    qtbot.mouseClick(header.viewport(), Qt.LeftButton, pos=QPoint(x, header.height() // 2))


def test_header_click_twice_reverses_the_sort(window, qtbot, standin):
    load(window, qtbot, standin)
    model, header = window.caseload.model, window.caseload.table.horizontalHeader()
    _click_header(qtbot, header, DAYS_SINCE)
    days = [int(v) for v in column_values(model, DAYS_SINCE)]
    assert days == sorted(days) and days[0] < days[-1]
    _click_header(qtbot, header, DAYS_SINCE)
    days = [int(v) for v in column_values(model, DAYS_SINCE)]
    assert days == sorted(days, reverse=True)
    assert header.sortIndicatorOrder() == Qt.DescendingOrder
    _click_header(qtbot, header, CASE)   # another column starts ascending again
    ids = column_values(model, CASE)
    assert ids == sorted(ids) and header.sortIndicatorOrder() == Qt.AscendingOrder


def test_as_of_field_rescores_when_editing_finishes_not_per_keystroke(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    loads = standin.loads
    edit = window.as_of_edit
    edit.setFocus()
    edit.setSelectedSection(QDateTimeEdit.YearSection)
    qtbot.keyClicks(edit, "2024")             # four keystrokes, each a valid date on its way
    qtbot.wait(900)                            # longer than any debounce
    assert standin.loads == loads and window.loaded is loaded
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        qtbot.keyClick(edit, Qt.Key_Return)    # editing finished
    assert standin.loads == loads + 1
    assert window.loaded.scores.as_of.year == 2024 and window.as_of.year == 2024
    # the same date again does not rescore
    edit.editingFinished.emit()
    qtbot.wait(500)
    assert standin.loads == loads + 1
    assert window.as_of == dt.date(2024, window.as_of.month, window.as_of.day)


def test_case_title_says_1_day_ago(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    s = loaded.scores
    row = int(np.argmax(s.last_contact_day))
    case_id = str(s.case_ids[row])
    next_day = from_day(int(s.last_contact_day[row]) + 1)
    if next_day != window.as_of:
        with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
            window.as_of_edit.setDate(next_day)
    assert window.case_view.refresh_case(case_id)
    assert "(1 day ago)" in window.case_view.title.text() and "1 days" not in window.case_view.title.text()
    assert window.caseload.count.text().endswith("flagged") and " cases shown" in window.caseload.count.text()
