"""Case work in the window: the forms, the application layer, and the one-case refresh afterwards.

The panels emit what the user asked for; this controller opens the form or dialog, which calls
:mod:`caseview.operations.casework` (the same jobs as the command line), and then rescores only the
changed case (:func:`caseview.operations.casework.rescore_case`) so that the table row, the case
pane and the risk queue show the new estimate at once, without rescoring the caseload.
"""

from __future__ import annotations

import time

import numpy as np

from caseview.operations.single_case import few_blas_threads
from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QAction, QKeySequence


class CaseworkController(QObject):
    """Owned by the main window; ``case_refreshed(case_id, seconds)`` after each one-case refresh."""

    case_refreshed = Signal(str, float)

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self.last_refresh_seconds = None
        self.last_splice_seconds = None
        actions = window.case_view.actions
        actions.record_requested.connect(self.record_contact)
        actions.correct_requested.connect(self.correct_contact)
        actions.void_requested.connect(self.void_contact)
        actions.versions_requested.connect(self.show_versions)
        actions.close_requested.connect(self.close_case)
        actions.reopen_requested.connect(self.reopen_case)
        window.caseload.case_selected.connect(lambda _row: self.update_case_actions())
        window.caseload_loaded.connect(lambda _loaded: self.update_case_actions())
        window.caseload_loaded.connect(lambda _loaded: few_blas_threads())  # finds the BLAS libraries once, now
        window.caseload.selection_cleared.connect(self.update_case_actions)
        window.case_view.contacts.itemSelectionChanged.connect(self._contact_selected)
        window.caseload.show_closed.toggled.connect(self.set_show_closed)
        self.action_record = QAction("Record contact…", window, shortcut=QKeySequence("Ctrl+Shift+R"),
                                     triggered=lambda: self.record_contact(self.current_case()))
        self.action_add = QAction("Add a person…", window, shortcut=QKeySequence("Ctrl+Shift+A"),
                                  triggered=self.add_person)
        from PySide6.QtWidgets import QMenu

        menu = QMenu("&Case", window)
        help_menu = [a for a in window.menuBar().actions() if a.text().replace("&", "") == "Help"]
        if help_menu:  # before Help, which stays last
            window.menuBar().insertMenu(help_menu[0], menu)
        else:
            window.menuBar().addMenu(menu)
        for action in (self.action_record, self.action_add):
            menu.addAction(action)

    # ------------------------------------------------------------------ state
    def current_case(self) -> str:
        return self.window.caseload.current_case_id() or ""

    def _workspace(self):
        ws = self.window.workspace()
        if ws is None:
            self.window.show_error("Open a workspace first (Ctrl+O).")
        return ws

    def _contact_selected(self) -> None:
        table = self.window.case_view.contacts
        row = table.currentRow()
        item = table.item(row, 0) if row >= 0 and table.selectedItems() else None
        self.window.case_view.actions.set_contact(item.text() if item is not None else "")

    def update_case_actions(self) -> None:
        """Closing hint and buttons for the case on show (reads that case only)."""
        from caseview.operations import casework
        from caseview.storage.casework_store import case_closure

        ws, case_id = self.window.workspace(), self.current_case()
        if ws is None or not case_id:
            self.window.case_view.actions.show_case(case_id, "", None)
            return
        closure = case_closure(ws.connection, case_id)
        self.window.case_view.actions.show_case(case_id, casework.closing_suggestion(ws, case_id), closure)
        self._contact_selected()  # a contact still selected in the refilled list stays the one acted on

    # ------------------------------------------------------------------ forms
    def record_contact(self, case_id: str) -> None:
        if not case_id:
            self.add_person()
            return
        ws = self._workspace()
        if ws is None:
            return
        from .record_form import RecordForm

        form = RecordForm(ws, self.window.actor, case_id, parent=self.window)
        if form.exec():
            self.after_change(form.result.case_id, " ".join(filter(None, (
                self._after_as_of(form.result.date), form.result.closing_suggestion))))

    def add_person(self) -> None:
        ws = self._workspace()
        if ws is None:
            return
        from .record_form import RecordForm

        form = RecordForm(ws, self.window.actor, None, parent=self.window)
        if form.exec():
            self.after_change(form.result.case_id, self._after_as_of(form.result.date))

    def _after_as_of(self, date: str) -> str:
        if date <= self.window.as_of.isoformat():
            return ""
        return (f"The contact of {date} is after the as-of date {self.window.as_of.isoformat()}: move the as-of "
                "date to see it in the estimates.")

    def _current_version(self, case_id: str, date: str):
        from caseview.operations import casework

        ws = self._workspace()
        if ws is None or not date:
            return None, None
        found = [v for v in casework.list_contacts(ws, case_id) if v.date == date]
        return ws, (found[0] if found else None)

    def correct_contact(self, case_id: str, date: str) -> None:
        ws, version = self._current_version(case_id, date)
        if version is None:
            return
        from .contact_dialogs import CorrectContactDialog

        dialog = CorrectContactDialog(ws, self.window.actor, version, parent=self.window)
        if dialog.exec():
            self.after_change(case_id)

    def void_contact(self, case_id: str, date: str) -> None:
        ws, version = self._current_version(case_id, date)
        if version is None:
            return
        from .contact_dialogs import VoidContactDialog

        dialog = VoidContactDialog(ws, self.window.actor, version, parent=self.window)
        if dialog.exec():
            self.after_change(case_id)

    def show_versions(self, case_id: str) -> None:
        ws = self._workspace()
        if ws is None or not case_id:
            return
        from .contact_dialogs import ContactVersionsDialog

        ContactVersionsDialog(ws, case_id, parent=self.window).exec()

    def close_case(self, case_id: str) -> None:
        ws = self._workspace()
        if ws is None or not case_id:
            return
        from caseview.operations import casework
        from caseview.operations.casework import store

        from .case_dialogs import CloseCaseDialog

        history = store.contact_history(ws.connection, case_id)
        last = history[-1].date if history else None
        import datetime as dt

        suggestion = casework.closing_suggestion(ws, case_id)
        if suggestion:  # the record shows the move: close from that contact's date
            day = dt.date.fromisoformat(last)
        else:
            day = max(dt.date.fromisoformat(last), self.window.as_of) if last else self.window.as_of
        dialog = CloseCaseDialog(ws, self.window.actor, case_id, day, suggestion, parent=self.window)
        if dialog.exec():
            self.after_change(case_id)

    def reopen_case(self, case_id: str) -> None:
        ws = self._workspace()
        if ws is None or not case_id:
            return
        from caseview.errors import CaseviewError
        from caseview.operations import casework

        try:
            casework.reopen_case(ws, case_id, self.window.actor)
        except CaseviewError as exc:
            self.window.show_error(str(exc))
            return
        self.after_change(case_id)

    def set_show_closed(self, on: bool) -> None:
        source = self.window.source
        if source is None:
            return
        source.include_closed = bool(on)
        self.window.rescore()

    # ------------------------------------------------------------------ one-case refresh
    def after_change(self, case_id: str, note: str = "", select: bool = True) -> float | None:
        """Rescore ``case_id`` alone and show it in the table, the case pane and the risk queue.

        ``select=False`` (a colleague's change) leaves the selection where it is; the case pane
        redraws only when it shows that case. Returns the seconds taken (None when the caseload is
        not scored yet: then it is rescored).
        """
        from caseview.operations import casework

        window = self.window
        ws = window.workspace()
        if ws is None or window.loaded is None:
            window.rescore()
            return None
        window.jobs.cancel("reasons")  # the splice writes the changed case's row in place
        started = time.perf_counter()
        include_closed = bool(window.source.include_closed)
        before = window.loaded
        ids = before.scores.case_ids
        position = int(np.searchsorted(ids, case_id))
        was_present = position < ids.size and ids[position] == case_id
        queue_before = window.risk_queue.case_state(position) if was_present else None
        with few_blas_threads():
            loaded, row = casework.rescore_case(ws, before, case_id, include_closed)
            self.last_splice_seconds = time.perf_counter() - started
            window.loaded = loaded
            window.case_view.set_scores(loaded.scores, loaded.assessment)
            if was_present and row >= 0:  # the same cases: one row of the table and of the queue, and the pane
                window.caseload.update_case(loaded, row)
                if window.caseload.current_case_id() == case_id:
                    window.case_view.show_rescored(row)
                elif select:
                    window.caseload.select_case(case_id)  # shows it in the case pane
                window.risk_queue.update_case(loaded, row, queue_before)
        if not (was_present and row >= 0):  # a case added or gone: the table's rows change
            window.caseload.set_caseload(loaded)  # re-announces the selected case to the pane
            window.risk_queue.set_caseload(loaded)
            if row >= 0 and select:
                window.caseload.select_case(case_id)
        self.update_case_actions()
        seconds = time.perf_counter() - started
        self.last_refresh_seconds = seconds
        if row < 0:
            message = (f"{case_id} is closed or has no contact on or before "
                       f"{window.as_of.isoformat()}, so it is not in the table.")
        else:
            message = f"{'Saved; ' if select else ''}{case_id} rescored ({seconds * 1000:.0f} ms)."
        window.statusBar().showMessage(" ".join(part for part in (message, note) if part))
        window._start_reasons(loaded)
        self.case_refreshed.emit(case_id, seconds)
        return seconds
