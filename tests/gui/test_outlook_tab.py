"""The Outlook tab: worked out in a worker when shown, drawn with labelled layers, targeting list and export."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from caseview import ADVISORY_NOTICE
from caseview.followup.targeting import PLANNING_NOTE
from caseview.operations.outlook import run_outlook
from caseview.storage import Workspace

from .conftest import open_ws
from .standin import AS_OF

pytestmark = pytest.mark.gui


def _show_outlook(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    panel = window.outlook_panel
    with qtbot.waitSignal(panel.outlook_ready, timeout=90000) as outlook, \
            qtbot.waitSignal(panel.targeting.ranked, timeout=90000) as ranked:
        window.tabs.setCurrentWidget(panel)
        assert panel.progress.isVisible() or not window.jobs.busy("outlook")
    return panel, outlook.args[0], ranked.args[0]


def test_outlook_tab_draws_what_the_application_function_computes(window, qtbot, workspace_path):
    panel, outlook, _ = _show_outlook(window, qtbot, workspace_path)
    with Workspace.open(workspace_path) as ws:
        direct = run_outlook(ws, AS_OF)
    assert np.allclose(outlook.expected, direct.expected) and np.array_equal(outlook.upper_95, direct.upper_95)
    assert panel.assumption.text().startswith("New referrals:")
    assert ADVISORY_NOTICE in panel.details.text()
    top, bottom = panel.canvas.figure.axes
    stages = outlook.rows[:-1]
    labels = [t.get_text() for t in top.texts]
    assert len(labels) == len(stages) and all(text.startswith(stage) for text, stage in zip(labels, stages))
    # the layers are stacked: each label's layer top is the running sum of the expected counts
    tops = [line.get_ydata() for line in top.lines]
    assert np.allclose(tops[-1], outlook.expected[:, :-1].sum(axis=1))
    assert any("in follow-up" in t.get_text() for t in bottom.texts)


def test_targeting_list_comparison_and_export(window, qtbot, workspace_path, tmp_path):
    panel, _, result = _show_outlook(window, qtbot, workspace_path)
    area = panel.targeting
    assert area.table.rowCount() == result.n_ranked and area.table.item(0, 1).text() == result.case_ids[0]
    assert "by benefit (this ranking)" in area.comparison.text() and PLANNING_NOTE in area.note.text()
    area.places.setValue(5)
    area.among.setCurrentIndex(area.among.findData("all"))
    with qtbot.waitSignal(area.ranked, timeout=90000) as ranked:
        area.rank_button.click()
    result = ranked.args[0]
    assert result.n_ranked == 5 and area.table.rowCount() == 5 and result.among == "all"
    summary = area.export(tmp_path / "places.csv")
    table = pd.read_csv(tmp_path / "places.csv")
    assert list(table["case_id"]) == list(result.case_ids) and set(table["advisory"]) == {ADVISORY_NOTICE}
    assert pd.read_csv(summary)["expected_averted"].iloc[0] == pytest.approx(result.averted_by_benefit, abs=1e-4)


def test_refusal_and_cancel_reach_the_label(window, qtbot, workspace_path):
    panel, _, _ = _show_outlook(window, qtbot, workspace_path)
    panel.uncertainty.setCurrentIndex(panel.uncertainty.findData("parameters"))
    panel.update_button.click()
    qtbot.waitUntil(lambda: "entered, not fitted" in panel.assumption.text(), timeout=60000)
    assert panel.update_button.isEnabled() and panel.outlook is not None   # the previous outlook stays
    panel.uncertainty.setCurrentIndex(panel.uncertainty.findData("none"))
    panel.months.setValue(120)
    panel.update_button.click()
    panel.cancel_button.click()
    qtbot.waitUntil(lambda: not window.jobs.busy("outlook"), timeout=60000)
    qtbot.waitUntil(lambda: panel.update_button.isEnabled(), timeout=10000)
    assert "cancelled" in panel.assumption.text() or len(panel.outlook.dates) == 120


def test_outlook_tab_on_an_in_memory_caseload_uses_the_shown_scores(window, qtbot, standin):
    """No workspace file: the tab works from the scores the window shows; parameter draws are refused."""
    from caseview.operations.outlook import outlook_from_scores

    with qtbot.waitSignal(window.caseload_loaded, timeout=90000):
        window.set_source(standin)
    panel = window.outlook_panel
    with qtbot.waitSignal(panel.outlook_ready, timeout=90000) as ready:
        window.tabs.setCurrentWidget(panel)
    direct = outlook_from_scores(window.loaded.scores, None, AS_OF)
    assert np.allclose(ready.args[0].expected, direct.expected)
    panel.uncertainty.setCurrentIndex(panel.uncertainty.findData("parameters"))
    panel.update_button.click()
    qtbot.waitUntil(lambda: "not fitted" in panel.assumption.text(), timeout=60000)


def test_the_tab_says_the_parameter_draws_move_where_cases_are_now(window, qtbot, workspace_path):
    """A current model with a stored fit covariance (every free parameter, standard error 0.2)."""
    from hmm.fitting.parameters import parameter_spec

    with Workspace.open(workspace_path) as ws:
        model, version = ws.current_model()
        names = list(parameter_spec(model).names)
        from hmm.fitting import FitSummary

        # a stored summary as every fit stores it (read back through FitSummary.from_dict)
        stored = FitSummary(-100.0, -100.0, False, len(names), 120, 600, 0.0, 0.0, 10, 20, True,
                            free_parameters=tuple(names),
                            covariance=tuple(map(tuple, (0.04 * np.eye(len(names))).tolist()))).to_dict()
        ws.add_model_version(version.json_text, "with a covariance (test)", "tester", fit_summary=stored)
    panel, plain, _ = _show_outlook(window, qtbot, workspace_path)
    panel.uncertainty.setCurrentIndex(panel.uncertainty.findData("parameters"))
    panel.draws.setValue(20)
    with qtbot.waitSignal(panel.outlook_ready, timeout=90000) as ready:
        panel.update_button.click()
    wide = ready.args[0]
    assert wide.uncertainty == "parameters" and wide.now_rescored == wide.n_open
    assert "stage probabilities now recomputed from its contacts under every drawn model" in panel.details.text()
    assert (wide.upper_95 - wide.lower_95).sum() > (plain.upper_95 - plain.lower_95).sum()
