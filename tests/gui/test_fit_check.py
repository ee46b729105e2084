"""The model panel's fit check: computed in a worker, drawn, audited; cancel leaves nothing behind."""

from __future__ import annotations

import pytest

from .conftest import open_ws

pytestmark = pytest.mark.gui


def test_fit_check_runs_in_worker_draws_and_audits(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    area = window.model_panel.fit_check
    area.bootstrap.setValue(5)
    with qtbot.waitSignal(area.finished, timeout=60000) as blocker:
        area.check_button.click()
        assert not area.check_button.isEnabled()   # the window stays responsive; the job runs in the pool
    result = blocker.args[0]
    assert result.n_bootstrap == 5 and 0 < result.p_value <= 1
    assert "p = " in area.summary.text() and area.check_button.isEnabled()
    # one chart per observation channel, each with observed dots and expected lines for every category
    model = window.model_panel.model
    axes = area.chart.canvas.figure.axes
    assert [a.get_title(loc="left") for a in axes] == [c.name for c in model.channels]
    assert all(len(a.lines) == 2 * len(c.categories) for a, c in zip(axes, model.channels))
    entry = window.workspace().audit_entries()[-1]
    assert entry.action == "model.fit_check" and entry.details["bootstrap"] == 5


def test_fit_check_cancel_and_stale_result(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    area = window.model_panel.fit_check
    audit_before = len(window.workspace().audit_entries())
    area.bootstrap.setValue(9999)
    with qtbot.waitSignal(area.cancelled, timeout=60000):
        area.start()
        area.cancel()
    assert "cancelled" in area.summary.text() and area.result is None
    assert len(window.workspace().audit_entries()) == audit_before
    # a finished result is cleared when the model changes
    area.bootstrap.setValue(0)
    with qtbot.waitSignal(area.finished, timeout=60000):
        area.start()
    window.model_panel.refresh()
    assert area.result is None and not area.chart.canvas.figure.axes
