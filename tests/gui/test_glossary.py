"""Help > Glossary explains every term the window shows."""

from __future__ import annotations

import pytest

from caseview.gui import caseload_model, risk_queue_model
from caseview.gui.glossary import GLOSSARY, glossary_html

pytestmark = pytest.mark.gui

TERMS = {term for term, _ in GLOSSARY}

# each column or label the window shows -> the glossary term that explains it
SHOWN = {
    "Likely stage now": "most likely stage", "Follow-up now": "follow-up stage", "Reach follow-up": "reach",
    "Next contact due": "next contact due", "Flags": "flag", "Review": "review status",
    "Review note": "review note", "Rules that fired": "flag", "Coordinator": "coordinator", "Case": "case",
    "Last contact": "contact", "Days since": "contact", "As of": "as-of date", "Horizon": "horizon",
    "most likely path": "most likely path", "uncertainty": "uncertainty shade", "What if": "what-if",
    "95% interval": "interval", "Time in stage": "time in stage", "Hazard ratios": "hazard ratio",
    "Observation probabilities": "observation channel", "Versions": "model version", "Fit": "fitting",
    "overdue flags": "overdue flag", "Advisory": "advisory", "Audit trail": "audit trail",
}


def test_every_term_the_window_shows_is_in_the_glossary():
    shown = set(caseload_model.COLUMNS) | set(risk_queue_model.COLUMNS)
    assert shown <= set(SHOWN), shown - set(SHOWN)
    missing = {label: term for label, term in SHOWN.items() if term not in TERMS}
    assert not missing
    for required in ("stage", "follow-up stage", "reach", "horizon", "interval", "advisory", "chance words"):
        assert required in TERMS


def test_glossary_states_the_chance_bands_and_the_advisory_caution():
    text = dict(GLOSSARY)
    assert "very likely: 90% and over" in text["chance words"] and "unlikely: 10% to 34%" in text["chance words"]
    assert "not a diagnosis" in text["advisory"] and "licensed clinician" in text["advisory"]
    assert "estimate, not a record" in text["most likely path"]


def test_help_menu_opens_the_glossary_and_filters(window, qtbot):
    menus = [a.text().replace("&", "") for a in window.menuBar().actions()]
    assert "Help" in menus
    window.action_glossary.trigger()
    dialog = window.glossary
    assert dialog.isVisible() and "follow-up stage" in dialog.text.toPlainText()
    qtbot.keyClicks(dialog.filter, "horizon")
    shown = dialog.text.toPlainText()
    assert "horizon —" in shown and "audit trail —" not in shown
    assert "No term matches" in glossary_html("zzzz")


def test_model_tab_leads_with_sentences(window, qtbot, standin):
    from .test_window import load

    load(window, qtbot, standin)
    panel = window.model_panel
    assert panel.details.tabText(0) == "In plain words" and panel.details.currentIndex() == 0
    text = panel.summary_view.toPlainText()
    assert "People typically stay Stable for about" in text and "contacts when Stable" in text
    assert "not a diagnosis" in text
    assert panel.details.tabText(1) == "Time in stage"   # the statistician's table, one tab away


def test_screenshot_of_the_glossary_dialog(tmp_path, qtbot, workspace_path):
    from PySide6.QtGui import QImage

    from caseview.gui.main_window import MainWindow

    w = MainWindow()
    qtbot.addWidget(w)
    out = tmp_path / "glossary.png"
    assert w.render_screenshot(out, workspace_path, dialog="glossary") == 0
    image = QImage(str(out))
    assert not image.isNull() and (image.width(), image.height()) == (720, 640)   # the dialog, not the window


def test_view_menu_lists_every_tab(window):
    view = next(a.menu() for a in window.menuBar().actions() if a.text().replace("&", "") == "View")
    names = [a.text() for a in view.actions()]
    tabs = [window.tabs.tabText(i) for i in range(window.tabs.count())]
    assert tabs and all(t in names for t in tabs)
