"""The table appears before the reasons; reasons then arrive in the background, risk queue first,
and a case the user looks at is explained on the spot."""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import Qt

from caseview.gui.main_window import MainWindow

from .standin import AS_OF

pytestmark = pytest.mark.gui


def test_reasons_arrive_after_the_table_and_match_the_cli(window, qtbot, workspace_path):
    import caseview.followup as followup
    from caseview.storage import Workspace

    window.REASONS_PER_STEP = 7  # several background steps even on a small workspace
    arrived = []
    window.reasons_arrived.connect(lambda rows: arrived.append(np.asarray(rows).copy()))
    with qtbot.waitSignal(window.reasons_ready, timeout=90000):
        with qtbot.waitSignal(window.caseload_loaded, timeout=90000):
            assert window.open_workspace(workspace_path)
    a = window.loaded.assessment
    assert a.reasons_pending.size == 0
    queue_rows = set(window.risk_queue.rows.tolist())
    # the background job reported its steps (a test that passed with nothing arriving would prove nothing);
    # the first step is the risk queue (what a supervisor looks at first)
    assert arrived, "the reasons job reported nothing"
    assert set(arrived[0].tolist()) <= queue_rows
    # every flagged case has the reasons an eager assessment gives (caseview flags / reports)
    with Workspace.open(workspace_path) as ws:
        eager = followup.assess_caseload(ws, AS_OF, window.horizon_days, reopen=False)
    assert list(a.reason_text) == list(eager.reason_text)
    flagged = np.flatnonzero(a.is_flagged)
    assert flagged.size and all(a.reason_text[r] for r in flagged)
    # the risk queue's tooltips and the table's tooltip show them
    queue_model = window.risk_queue.model
    last = queue_model.columnCount() - 1
    assert queue_model.data(queue_model.index(0, last), Qt.ToolTipRole) == a.reason_text[window.risk_queue.rows[0]]
    model = window.caseload.model
    from caseview.gui.caseload_model import FLAGS

    view_row = model.view_row_of_case(str(a.scores.case_ids[flagged[0]]))
    assert model.data(model.index(view_row, FLAGS), Qt.ToolTipRole) == a.reason_text[flagged[0]]


def test_selected_case_is_explained_on_the_spot(window, qtbot, workspace_path):
    window._start_reasons = lambda loaded: None  # no background job: only what the user looks at
    with qtbot.waitSignal(window.caseload_loaded, timeout=90000):
        assert window.open_workspace(workspace_path)
    a = window.loaded.assessment
    queue = window.risk_queue
    assert queue.model.rowCount() > 1
    second = int(queue.rows[1])
    assert not a.has_reasons(second)
    last = queue.model.columnCount() - 1
    assert "select it" in queue.model.data(queue.model.index(1, last), Qt.ToolTipRole)
    queue.table.selectRow(1)
    assert a.has_reasons(second) and "why flagged" in queue.reasons.text()
    assert a.reasons[second] and a.reasons[second][0].message in queue.reasons.text()
    # the caseload table's tooltip works it out too
    from caseview.gui.caseload_model import FLAGS

    model = window.caseload.model
    third = int(queue.rows[2]) if queue.rows.size > 2 else second
    text = model.data(model.index(model.view_row_of_case(str(a.scores.case_ids[third])), FLAGS), Qt.ToolTipRole)
    assert text and text == a.reason_text[third] and a.has_reasons(third)


def test_closing_while_reasons_are_worked_out_stops_the_job(qtbot, workspace_path):
    import gc

    thresholds = gc.get_threshold()
    w = MainWindow(as_of=AS_OF)
    w.setProperty("quiet", True)
    qtbot.addWidget(w)
    w.show()
    w.REASONS_PER_STEP = 1  # many small steps: the job is still running when the window closes
    with qtbot.waitSignal(w.caseload_loaded, timeout=90000):
        assert w.open_workspace(workspace_path)
    w.close()  # cancels and waits (closeEvent)
    assert not w.jobs.busy()
    assert gc.get_threshold() == thresholds  # full collections are back to normal
