"""Window tests on a real workspace (storage, follow-up, import), and the screenshot command."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from .conftest import open_ws
from .standin import AS_OF

pytestmark = pytest.mark.gui


def test_review_flag_writes_audit_entry(window, qtbot, workspace_path):
    loaded = open_ws(window, qtbot, workspace_path)
    queue = window.risk_queue
    assert loaded.assessment is not None and queue.model.rowCount() > 0
    queue.table.selectRow(0)
    case_id = queue.model.text(queue.rows[0], 0)
    assert "why flagged" in queue.reasons.text()
    assert queue.acknowledge.isEnabled() and not queue.dismiss.isEnabled()  # new -> acknowledged only
    queue.note.setText("seen at the team meeting")
    assert queue.model.text(queue.rows[0], 5) == "new"
    with qtbot.waitSignal(queue.review_recorded, timeout=10000) as blocker:
        queue.acknowledge.click()
    assert blocker.args == [case_id, "acknowledged"]
    # the audit trail (from storage, not the window) holds the review, and the view shows it
    entries = window.workspace().audit_entries(case_id=case_id)
    assert entries[-1].action == "review.acknowledged" and entries[-1].details["note"] == "seen at the team meeting"
    assert any("review.acknowledged" in queue.audit_list.item(i).text() for i in range(queue.audit_list.count()))
    # the caseload table shows the new status; dismissing now needs a reason
    row = window.caseload.model.view_row_of_case(case_id)
    assert window.caseload.model.data(window.caseload.model.index(row, 9)) == "acknowledged"
    assert queue.dismiss.isEnabled()
    assert queue.review_selected("dismissed", note="judged unfounded after a phone call")
    assert window.workspace().audit_entries(case_id=case_id)[-1].action == "review.dismissed"
    queue.verify_audit()
    assert "intact" in queue.audit_status.text()


def test_import_bad_file_lists_every_error(window, qtbot, workspace_path, tmp_path):
    open_ws(window, qtbot, workspace_path)
    before = window.workspace().contact_count()
    bad = tmp_path / "bad.csv"
    bad.write_text("case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme\n"
                   "HS-900001,2026-02-30,C1,normal,none,none,0,0\n"
                   "HS-900002,2026-03-01,C1,sprinting,none,none,0,0\n"
                   "HS-900003,2026-03-02,C1,normal,none,none,yes,0\n", encoding="utf-8")
    from caseview.gui.import_dialog import ImportDialog

    dialog = ImportDialog(window.source, "tester", window)
    qtbot.addWidget(dialog)
    dialog.load_file(bad)
    assert dialog.preview.rowCount() == 3 and dialog.preview.item(1, 3).text() == "sprinting"
    dialog.check()
    qtbot.waitUntil(lambda: dialog.check_button.isEnabled() and dialog.problems.count() > 0, timeout=30000)
    lines = [dialog.problems.item(i).text() for i in range(dialog.problems.count())]
    assert len(lines) >= 3
    for line_number, value in ((2, "2026-02-30"), (3, "sprinting"), (4, "yes")):
        assert any(f"line {line_number}" in text and value in text for text in lines), (line_number, lines)
    assert not dialog.import_button.isEnabled()
    assert window.workspace().contact_count() == before  # nothing stored


def test_import_good_file_after_check(window, qtbot, workspace_path, tmp_path):
    open_ws(window, qtbot, workspace_path)
    before = window.workspace().contact_count()
    good = tmp_path / "good.csv"
    good.write_text("case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme\n"
                    "HS-900001,2026-03-01,C1,normal,none,none,0,0\n", encoding="utf-8")
    from caseview.gui.import_dialog import ImportDialog

    dialog = ImportDialog(window.source, "tester", window)
    qtbot.addWidget(dialog)
    dialog.load_file(good)
    dialog.check()
    qtbot.waitUntil(lambda: dialog.import_button.isEnabled(), timeout=30000)
    assert window.workspace().contact_count() == before  # checking stores nothing
    assert "would add 1 contacts (1 new cases)" in dialog.summary.text()
    dialog.do_import()
    qtbot.waitUntil(lambda: window.workspace().contact_count() == before + 1, timeout=30000)


def test_screenshot_command_writes_png_of_the_right_size(workspace_path, tmp_path):
    out = tmp_path / "window.png"
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    done = subprocess.run([sys.executable, "-m", "caseview", "gui", str(workspace_path), "--as-of", "2026-11-30",
                           "--screenshot", str(out)], env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    # PNG signature and IHDR width/height (PNG specification, ISO/IEC 15948, section 11.2.2)
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    assert (width, height) == (1400, 900)


def test_gui_without_display_explains_what_to_do(tmp_path):
    env = {k: v for k, v in os.environ.items() if k not in ("QT_QPA_PLATFORM", "DISPLAY", "WAYLAND_DISPLAY")}
    done = subprocess.run([sys.executable, "-m", "caseview", "gui"], env=env, capture_output=True, text=True,
                          timeout=60)
    assert done.returncode != 0
    assert "no display" in done.stderr and "--screenshot" in done.stderr and "caseview score" in done.stderr


def test_fit_in_worker_previews_then_asks_before_the_new_version_becomes_current(window, qtbot, workspace_path):
    open_ws(window, qtbot, workspace_path)
    panel = window.model_panel
    ws = window.workspace()
    versions_before = len(ws.model_versions())
    current_before = [v.id for v in ws.model_versions() if v.is_current]
    panel.starts.setValue(1)
    panel.intervals.setCurrentIndex(panel.intervals.findData("wald"))   # fast; profile intervals: tests/fitting
    panel.calibration.setValue(2)   # two calibration refits only (the default, 40, is for real use)
    finished, failures = [], []
    panel.fit_finished.connect(finished.append)
    panel.fit_failed.connect(failures.append)
    panel.start_fit()
    qtbot.waitUntil(lambda: bool(finished or failures), timeout=540000)
    assert not failures, failures
    result = finished[0]
    versions = ws.model_versions()
    assert len(versions) == versions_before + 1
    assert [v.id for v in versions if v.is_current] == current_before        # stored, not current yet
    fitted = versions[-1]
    assert fitted.fit_summary["log_likelihood"] == pytest.approx(result.log_likelihood)
    # the window fits to the contacts up to its as-of date and records it, and the version it started from
    assert fitted.fit_summary["contacts_as_of"] == window.loaded.scores.as_of.isoformat()
    assert fitted.fit_summary["fitted_from_version"] == current_before[0]
    entry = ws.audit_entries()[-1]
    assert entry.action == "model.fit" and entry.details["make_current"] is False
    assert not panel.preview.isHidden() and "stored but not current" in panel.preview.text.text()
    assert "flag" in panel.preview.text.text() and "Advisory only" in panel.preview.text.text()
    with qtbot.waitSignal(panel.fit_decided, timeout=10000) as decided:
        panel.use_fitted.click()
    assert decided.args == [True] and panel.preview.isHidden()
    assert [v.id for v in ws.model_versions() if v.is_current] == [fitted.id]
    assert ws.audit_entries()[-1].action == "model.current"
    # the panel now shows fitted mean times in stage with intervals and their kind
    assert "fitted" in panel.heading.text() and "intervals" in panel.heading.text()
    assert fitted.fit_summary["calibration"]["draws"] == 2
    assert "widths calibrated by 2 bootstrap refits" in panel.heading.text()
    assert "refits of caseloads simulated from the fitted model" in panel.heading.toolTip()
    assert "caveat" not in panel.heading.toolTip() and "simulation study" in panel.heading.toolTip()
    assert panel.time_in_stage_table.rowCount() == len(fitted.fit_summary["mean_time_in_stage"])
    kinds = {panel.time_in_stage_table.item(r, 2).text() for r in range(panel.time_in_stage_table.rowCount())}
    assert any(k.endswith("wald") for k in kinds), kinds


def test_staff_estimates_from_the_model_panel_land_in_the_editor_unsaved(window, qtbot, workspace_path):
    from PySide6.QtWidgets import QDialogButtonBox

    from caseview.modelfile import parse_model

    open_ws(window, qtbot, workspace_path)
    panel = window.model_panel
    versions_before = len(window.workspace().model_versions())
    panel.editor.staff.click()
    dialog = panel.staff_dialog
    qtbot.waitUntil(dialog.isVisible, timeout=5000)
    stable = dialog.stages.index("Stable")
    dialog.stage_table.item(stable, dialog.stage_table.col_stay).setText("500")   # staff say: about 500 days
    qtbot.waitUntil(lambda: dialog.buttons.button(QDialogButtonBox.Ok).isEnabled(), timeout=5000)
    dialog.buttons.button(QDialogButtonBox.Ok).click()
    qtbot.waitUntil(lambda: panel.details.currentWidget() is panel.editor, timeout=5000)
    edited = parse_model(panel.editor.text.toPlainText(), source="editor")
    # mean sojourn = -1/q_rr (Norris 1997, Markov Chains, section 2.6)
    rates = edited.baseline_rate_matrix()
    exit_rate = rates[stable].sum() - rates[stable, stable]
    assert 1.0 / exit_rate == pytest.approx(500.0)
    assert "staff estimates" in panel.editor.message.text()
    assert len(window.workspace().model_versions()) == versions_before   # nothing saved until the user saves


def test_benchmark_window_measure_runs_on_a_small_workspace(workspace_path):
    # keeps benchmarks/gui_timing.py --part window from rotting; the figures themselves are the benchmark's
    from caseview.gui.timing import measure_window

    figures = measure_window(workspace_path, AS_OF, 90.0)
    assert 0 < figures["window_shown"] <= figures["reasons_done"]
    assert figures["longest_stall"] >= 0 and figures["stalls_over_100ms"] >= 0
