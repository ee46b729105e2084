"""The staff-estimates dialog (caseview/gui/staff_estimates_dialog.py), driven offscreen."""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QDialogButtonBox

from caseview.gui.staff_estimates_dialog import NOT_CHECKED, StaffEstimatesDialog
from caseview.modelfile import parse_model
from caseview.staff_estimates_file import load_staff_estimates
from tests.conftest import ROOT

EXAMPLE = ROOT / "resources" / "models" / "home_support_staff_estimates.json"

pytestmark = pytest.mark.gui


@pytest.fixture
def dialog(qtbot, demo_model):
    d = StaffEstimatesDialog(demo_model)
    qtbot.addWidget(d)
    return d


def ok_button(d):
    return d.buttons.button(QDialogButtonBox.Ok)


def test_opens_with_the_models_own_numbers_and_gives_the_model_back(dialog, demo_model):
    assert dialog.problems() == [] and ok_button(dialog).isEnabled()
    # the cells show rounded numbers but keep the exact values: the model comes back to rounding
    np.testing.assert_allclose(dialog.model().baseline_rate_matrix(), demo_model.baseline_rate_matrix(), rtol=1e-12)
    stable = demo_model.stage_index("Stable")
    # mean sojourn = -1/q_rr (Norris 1997, Markov Chains, section 2.6): Stable's only way out is rate 0.003
    assert dialog.stage_table.item(stable, dialog.stage_table.col_stay).text() == "333.3"
    assert "333.3 days on average" in dialog.preview.toPlainText()


def test_shares_that_do_not_add_up_are_highlighted_with_a_plain_message(qtbot, demo_model):
    dialog = StaffEstimatesDialog(demo_model, estimates=load_staff_estimates(EXAMPLE))   # Slipping: 0.4/0.5/0.1
    qtbot.addWidget(dialog)
    slipping = dialog.stages.index("Slipping")
    cell = dialog.stage_table.item(slipping, 2 + dialog.stages.index("Stable"))
    cell.setText("0.9")
    qtbot.waitUntil(lambda: not ok_button(dialog).isEnabled(), timeout=2000)
    assert dialog.model() is None and dialog.model_json() == ""
    assert cell.background().color().isValid() and cell.background().style() != Qt.NoBrush
    assert "stage 'Slipping'" in cell.toolTip()
    first = dialog.problem_list.item(0).text()
    assert "stage 'Slipping': the shares of where people go next add up to" in first
    assert "Fix the highlighted cells" in dialog.preview.toPlainText()
    # going to the problem selects the cell
    dialog.go_to_problem(dialog.problem_list.item(0))
    assert dialog.stage_table.currentRow() == slipping
    cell.setText("40%")        # a percentage is read as a share
    qtbot.waitUntil(lambda: ok_button(dialog).isEnabled(), timeout=2000)
    assert dialog.problem_list.count() == 0 and cell.background().style() == Qt.NoBrush
    rates = dialog.model().baseline_rate_matrix()
    assert rates[slipping, dialog.stages.index("Stable")] * dialog.estimates()["typical_stay_days"]["Slipping"] \
        == pytest.approx(0.4, rel=1e-12)


def test_usual_result_and_how_often_wrong_fill_the_row_evenly(dialog, qtbot):
    table = dialog.check_tables[0]
    stable = dialog.stages.index("Stable")
    table.cellWidget(stable, 0).setCurrentText("slow")
    table.item(stable, 1).setText("0.3")
    qtbot.waitUntil(lambda: dialog.model() is not None and np.allclose(
        dialog.model().channels[0].probabilities[stable], [0.15, 0.7, 0.15]), timeout=2000)
    assert [table.item(stable, 2 + k).text() for k in range(3)] == ["0.15", "0.7", "0.15"]
    table.item(stable, 1).setText("1.2")
    qtbot.waitUntil(lambda: not ok_button(dialog).isEnabled(), timeout=2000)
    assert "how often the result is wrong must be a share above 0 and below 1" in dialog.problems()[0].message
    assert table.item(stable, 1).background().style() != Qt.NoBrush
    # typing every share directly takes over, and the usual result follows the largest one
    table.item(stable, 2).setText("0.7")
    table.item(stable, 3).setText("0.2")
    table.item(stable, 4).setText("0.1")
    qtbot.waitUntil(lambda: ok_button(dialog).isEnabled(), timeout=2000)
    assert table.cellWidget(stable, 0).currentText() == "normal" and table.item(stable, 1).text() == "0.3"


def test_never_leaves_makes_a_stage_absorbing(dialog, qtbot):
    crisis = dialog.stages.index("Crisis")
    dialog.stage_table.item(crisis, dialog.stage_table.col_never).setCheckState(Qt.Checked)
    qtbot.waitUntil(lambda: dialog.model() is not None and crisis in dialog.model().absorbing_stages, timeout=2000)
    assert dialog.stage_table.item(crisis, dialog.stage_table.col_stay).text() == "never"
    assert not dialog.stage_table.item(crisis, dialog.stage_table.col_stay).flags() & Qt.ItemIsEditable
    hidden = [dialog.hazard_table.isRowHidden(i) for i, (a, _) in enumerate(dialog.hazard_table.pairs) if a == "Crisis"]
    assert all(hidden)


def test_starts_from_a_staff_estimate_file_and_ok_emits_the_model(qtbot, demo_model):
    d = StaffEstimatesDialog(demo_model, estimates=load_staff_estimates(EXAMPLE))
    qtbot.addWidget(d)
    exit_row = d.stages.index("Moved to residential care")
    assert d.check_tables[0].cellWidget(exit_row, 0).currentText() == NOT_CHECKED
    with qtbot.waitSignal(d.model_ready, timeout=2000) as signal:
        ok_button(d).click()
    model = parse_model(signal.args[0])
    rates = model.baseline_rate_matrix()
    assert 1 / rates[d.stages.index("Stable")].sum() == pytest.approx(330.0, rel=1e-12)   # from the file
    assert model.name.startswith("Home support demo from staff estimates")
    assert d.result() == QDialog.Accepted


def test_screenshot_renders(dialog, tmp_path):
    dialog.show()
    path = tmp_path / "staff_estimates.png"
    assert dialog.grab().save(str(path)) and path.stat().st_size > 10_000


def test_estimates_for_other_stages_are_refused(qtbot, demo_model):
    estimates = load_staff_estimates(EXAMPLE)
    estimates["stages"] = ("A", "B")
    with pytest.raises(ValueError, match="the estimates are for stages A, B"):
        StaffEstimatesDialog(demo_model, estimates=estimates)
