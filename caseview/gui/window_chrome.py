"""The main window's chrome: toolbar (workspace actions, as-of date, horizon), status bar and menus.

Each function builds its part on a :class:`~caseview.gui.main_window.MainWindow` and sets the
widgets and actions on it as attributes (``window.as_of_edit``, ``window.action_rescore`` ...).
"""

from __future__ import annotations

import datetime as dt

from PySide6.QtCore import QDate, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import QDateEdit, QLabel, QMenu, QProgressBar, QPushButton, QSpinBox, QToolBar, QToolButton

from . import theme


def build_top_bar(window, as_of: dt.date) -> None:
    """The toolbar: workspace actions, the as-of date and horizon.

    The as-of date and horizon rescore when editing finishes (Enter, leaving the field, the
    calendar, an arrow step), never on each keystroke (keyboard tracking off); arrow steps in a
    row are gathered for 0.4 s.
    """
    bar = QToolBar("Workspace")
    bar.setObjectName("topBar")
    bar.setMovable(False)
    bar.setToolButtonStyle(Qt.ToolButtonTextBesideIcon)
    window.addToolBar(Qt.TopToolBarArea, bar)
    window.action_new = QAction(theme.icon("new"), "New…", window, shortcut=QKeySequence.New,
                                triggered=window.create_workspace_dialog)
    window.action_new.setToolTip("Create a workspace from a model file (Ctrl+N)")
    window.action_open = QAction(theme.icon("open"), "Open…", window, shortcut=QKeySequence.Open,
                                 triggered=window.open_workspace_dialog)
    window.action_open.setToolTip("Open a workspace (Ctrl+O)")
    window.recent_menu = QMenu("Recent workspaces", window)
    window.recent_menu.aboutToShow.connect(window.fill_recent_menu)
    window.action_import = QAction(theme.icon("import"), "Import contacts…", window, shortcut="Ctrl+I",
                                   triggered=window.import_dialog)
    window.action_report = QAction(theme.icon("report"), "Report…", window, shortcut="Ctrl+R",
                                   triggered=window.report_dialog)
    window.action_rescore = QAction(theme.icon("rescore"), "Rescore", window, shortcut=QKeySequence("F5"),
                                    triggered=window.rescore)
    window.action_rescore.setToolTip("Score every case again as of the chosen date (F5)")
    bar.addAction(window.action_new)
    bar.addAction(window.action_open)
    recent_button = QToolButton()
    recent_button.setText("Recent")
    recent_button.setAccessibleName("Recent workspaces")
    recent_button.setMenu(window.recent_menu)
    recent_button.setPopupMode(QToolButton.InstantPopup)
    bar.addWidget(recent_button)
    bar.addSeparator()
    bar.addAction(window.action_import)
    bar.addAction(window.action_report)
    bar.addSeparator()
    bar.addWidget(QLabel(" As of "))
    window.as_of_edit = QDateEdit(QDate(as_of.year, as_of.month, as_of.day))
    window.as_of_edit.setCalendarPopup(True)
    window.as_of_edit.setDisplayFormat("yyyy-MM-dd")
    window.as_of_edit.setAccessibleName("As-of date")
    window.as_of_edit.setToolTip("Estimates use contacts on or before this date (press Enter to rescore)")
    window.as_of_edit.setKeyboardTracking(False)
    bar.addWidget(window.as_of_edit)
    bar.addWidget(QLabel("  Horizon "))
    window.horizon_spin = QSpinBox()
    window.horizon_spin.setRange(1, 3650)
    window.horizon_spin.setValue(90)
    window.horizon_spin.setSuffix(" days")
    window.horizon_spin.setAccessibleName("Forecast horizon in days")
    window.horizon_spin.setKeyboardTracking(False)
    bar.addWidget(window.horizon_spin)
    bar.addAction(window.action_rescore)
    window.workspace_label = QLabel("  No workspace open")
    window.workspace_label.setAccessibleName("Open workspace")
    bar.addWidget(window.workspace_label)
    window.rescore_timer = QTimer(window, singleShot=True, interval=400, timeout=window.rescore)
    window.as_of_edit.dateChanged.connect(lambda _: window.rescore_timer.start())
    window.horizon_spin.valueChanged.connect(lambda _: window.rescore_timer.start())


def build_status_bar(window) -> None:
    """The status bar: messages, the background job's progress and cancel, reasons progress."""
    status = window.statusBar()
    window.progress = QProgressBar()
    window.progress.setRange(0, 100)
    window.progress.setMaximumWidth(220)
    window.progress.setAccessibleName("Progress of the background job")
    window.progress.hide()
    window.cancel_button = QPushButton("Cancel")
    window.cancel_button.setAccessibleName("Cancel the background job")
    window.cancel_button.hide()
    window.cancel_button.clicked.connect(lambda: window.jobs.cancel("score"))
    window.reasons_status = QLabel("")
    window.reasons_status.setAccessibleName("Progress of working out why cases are flagged")
    window.reasons_status.hide()
    status.addPermanentWidget(window.reasons_status)
    status.addPermanentWidget(window.progress)
    status.addPermanentWidget(window.cancel_button)
    status.showMessage("Open a workspace (Ctrl+O) or create one from a model file (Ctrl+N).")


def build_menus(window) -> None:
    """The menus (every action also has a keyboard shortcut)."""
    menu = window.menuBar().addMenu("&Workspace")
    menu.addAction(window.action_new)
    menu.addAction(window.action_open)
    menu.addMenu(window.recent_menu)
    menu.addSeparator()
    menu.addAction(window.action_import)
    menu.addAction(window.action_report)
    menu.addSeparator()
    menu.addAction(QAction("Close window", window, shortcut=QKeySequence.Quit, triggered=window.close))
    view = window.menuBar().addMenu("&View")
    view.addAction(window.action_rescore)
    view.addAction(QAction("Find case", window, shortcut=QKeySequence.Find, triggered=window.caseload.focus_search))
    view.addAction(QAction("Sort by priority", window, shortcut="Ctrl+Shift+P",
                           triggered=window.caseload.sort_by_priority))
    for i in range(min(window.tabs.count(), 9)):   # every tab, whichever panels this build has
        view.addAction(QAction(window.tabs.tabText(i), window, shortcut=f"Ctrl+{i + 1}",
                               triggered=lambda _=False, i=i: window.tabs.setCurrentIndex(i)))
    help_menu = window.menuBar().addMenu("&Help")
    window.action_glossary = QAction("Glossary of terms", window, shortcut=QKeySequence.HelpContents,
                                     triggered=lambda: show_glossary(window))
    window.action_glossary.setToolTip("What the words in this window mean (F1)")
    help_menu.addAction(window.action_glossary)


def show_glossary(window):
    """Open (or bring forward) the glossary dialog; returns it."""
    from .glossary import GlossaryDialog

    dialog = getattr(window, "glossary", None)
    if dialog is None:
        dialog = window.glossary = GlossaryDialog(window)
    dialog.show()
    dialog.raise_()
    return dialog
