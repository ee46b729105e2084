"""Window tests (pytest-qt, offscreen): drive the widgets, assert on the view and on the data."""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import Qt

from caseview.gui.caseload_model import CASE, DAYS_SINCE, P_REACH
from caseview.gui.main_window import MainWindow

from .standin import AS_OF

pytestmark = pytest.mark.gui


def load(window, qtbot, source):
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.set_source(source)
    return window.loaded


def column_values(model, column, role=Qt.DisplayRole):
    return [model.data(model.index(r, column), role) for r in range(model.rowCount())]


def test_open_sort_filter(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    model = window.caseload.model
    assert model.rowCount() == loaded.scores.n_cases
    # default order: the assessment's priority (flagged first, then by follow-up probabilities), highest first
    shown = loaded.assessment.priority[[model.case_row(i) for i in range(model.rowCount())]]
    assert np.all(np.diff(shown) <= 1e-12) and loaded.assessment.is_flagged.any()
    # the view shows the percentage of the model's array for the top row
    top_row = model.case_row(0)
    assert column_values(model, P_REACH)[0] == f"{loaded.scores.p_reach_follow_up[top_row] * 100:.0f}%"
    # click "Days since": ascending, then descending
    header = window.caseload.table.horizontalHeader()
    window.caseload._header_clicked(DAYS_SINCE)
    days = [int(v) for v in column_values(model, DAYS_SINCE)]
    assert days == sorted(days)
    assert header.sortIndicatorSection() == DAYS_SINCE
    window.caseload._header_clicked(DAYS_SINCE)
    days = [int(v) for v in column_values(model, DAYS_SINCE)]
    assert days == sorted(days, reverse=True)
    # filter by coordinator through the combo box
    combo = window.caseload.coordinator
    combo.setCurrentIndex(combo.findData("C2"))
    expected = int((loaded.scores.coordinators == "C2").sum())
    assert model.rowCount() == expected > 0
    assert set(column_values(model, 1)) == {"C2"}
    combo.setCurrentIndex(0)
    # case-ID search (case-insensitive substring) through the search box
    qtbot.keyClicks(window.caseload.search, "hs-00001")
    ids = column_values(model, CASE)
    assert ids and all("HS-00001" in i for i in ids)
    assert len(ids) == sum("HS-00001" in str(c) for c in loaded.scores.case_ids)
    window.caseload.search.clear()
    # stage filter
    window.caseload.stage.setCurrentIndex(window.caseload.stage.findData(0))
    assert model.rowCount() == int((loaded.scores.most_likely_stage == 0).sum())


def test_select_case_updates_chart_and_contacts(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    panel, view = window.caseload, window.case_view
    target_row = int(np.argmax(loaded.scores.n_contacts))
    case_id = str(loaded.scores.case_ids[target_row])
    assert panel.select_case(case_id)
    assert view.data.case_id == case_id
    assert view.contacts.rowCount() == int(loaded.scores.n_contacts[target_row])
    assert view.contacts.item(0, 0).text() == \
        __import__("caseview.dates", fromlist=["from_day"]).from_day(view.data.contact_days[0]).isoformat()
    assert case_id in view.title.text()
    # the chart carries the smoothed probabilities (rows sum to 1) and the "now" curve ends at p_now
    assert np.allclose(view.data.smoothed.sum(axis=1), 1.0)
    assert np.allclose(view.data.now[-1], loaded.scores.p_now[target_row], atol=1e-9)
    axes = view.figure.axes
    assert len(axes) == 2 and len(axes[0].lines) >= 3 * len(loaded.scores.model.stages)


def test_whatif_overlay_changes_forecast(window, qtbot, standin):
    loaded = load(window, qtbot, standin)
    model = loaded.scores.model
    # a case not enrolled in the balance programme, not yet in an absorbing stage
    candidates = np.flatnonzero((loaded.scores.last_covariates[:, model.covariates.index("balance_programme")] == 0)
                                & (loaded.scores.p_now[:, 1] > 0.2))
    case_id = str(loaded.scores.case_ids[candidates[0]])
    window.caseload.select_case(case_id)
    view = window.case_view
    before = view.data.ahead.copy()
    view.whatif_box.setChecked(True)
    view.whatif_inputs["balance_programme"].setValue(1.0)
    assert view.data.whatif is not None
    assert np.allclose(view.data.ahead, before)
    # the demo model gives the programme hazard ratios < 1 on worsening moves (resources/models),
    # so the chance of a follow-up stage at the horizon must fall
    assert view.data.whatif_follow_up_at_horizon < view.data.follow_up_at_horizon
    assert "What-if" in view.whatif_summary.text()
    # the window's numbers are those of `caseview forecast` (one what-if function for both faces)
    from caseview.followup import whatif_forecast

    w = whatif_forecast(loaded.scores, case_id, changes={"balance_programme": 1.0})
    assert w.changed.p_follow_up_at_horizon == pytest.approx(view.data.whatif_follow_up_at_horizon, abs=1e-9)
    assert f"→ {w.changed.p_follow_up_at_horizon * 100:.0f}%" in view.whatif_summary.text()
    assert any(line.get_label() == "follow-up, what-if" for line in view.figure.axes[0].lines)


def test_fit_can_be_cancelled(window, qtbot, standin):
    load(window, qtbot, standin)
    panel = window.model_panel
    panel.starts.setValue(5)
    with qtbot.waitSignal(panel.fit_cancelled, timeout=60000):
        panel.start_fit()
        qtbot.waitUntil(lambda: panel.progress.value() > 0 or not panel.cancel_button.isEnabled(), timeout=30000)
        panel.cancel_fit()
    assert "cancelled" in panel.fit_message.text()
    assert panel.fit_button.isEnabled() and not panel.cancel_button.isEnabled()


def test_model_editor_validates_as_you_type(window, qtbot, standin):
    load(window, qtbot, standin)
    editor = window.model_panel.editor
    assert editor.save.isEnabled()
    text = editor.text.toPlainText()
    editor.text.setPlainText(text.replace('"rate": 0.003,', '"rate": -0.003,', 1))
    qtbot.waitUntil(lambda: not editor.save.isEnabled(), timeout=3000)
    assert "rate" in editor.message.text() and ">= 0" in editor.message.text()
    editor.text.setPlainText(text[:-5])
    qtbot.waitUntil(lambda: "not valid JSON" in editor.message.text(), timeout=3000)


def test_settings_remember_horizon(window, qtbot, standin):
    window.horizon_spin.setValue(45)
    window.close()
    again = MainWindow(as_of=AS_OF)
    qtbot.addWidget(again)
    assert again.horizon_spin.value() == 45


def test_search_and_case_option_read_typed_ids_like_the_importer(window, qtbot, standin):
    """Issue 12 item 4: full-width digits, Unicode dashes, invisible characters and letter case in the
    search box or in ``--case`` find the stored case; a near miss says which case was probably meant."""
    loaded = load(window, qtbot, standin)
    model = window.caseload.model
    window.caseload.search.setText("h\u200bs\u2010\uff10\uff10\uff10\uff10\uff11")  # keyClicks: ASCII only
    ids = column_values(model, CASE)
    assert ids and len(ids) == sum("HS-00001" in str(c) for c in loaded.scores.case_ids)
    window.caseload.search.clear()
    target = str(loaded.scores.case_ids[5])
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.set_source(standin, case_id=target.lower().replace("-", "\u2013"))
    assert window.caseload.current_case_id() == target
    with qtbot.waitSignal(window.caseload_loaded, timeout=60000):
        window.set_source(standin, case_id=target.replace("-", ""))
    assert f"did you mean '{target}'?" in window.statusBar().currentMessage()
