"""Close a case with a date and a reason from a short fixed list (reopening needs no dialog)."""

from __future__ import annotations

import datetime as dt

from PySide6.QtWidgets import QComboBox, QDateEdit, QDialog, QDialogButtonBox, QFormLayout, QLabel, QVBoxLayout

from .record_form import pydate, qdate

REASON_TEXT = {"moved": "moved (e.g. to residential care)", "discharged": "discharged from the service",
               "died": "died", "transferred": "transferred to another service", "other": "other"}


class CloseCaseDialog(QDialog):
    """Close ``case_id`` from a date; it leaves the caseload, the risk queue, flags and reports."""

    def __init__(self, workspace, actor: str, case_id: str, day: dt.date | None = None, suggestion: str = "",
                 parent=None):
        super().__init__(parent)
        from caseview.operations.casework import CLOSE_REASONS

        self.workspace, self.actor, self.case_id = workspace, actor, case_id
        self.result = None
        self.setWindowTitle(f"Close case — {case_id}")
        self.resize(460, 260)
        intro = QLabel("A closed case leaves the caseload table, the risk queue, flags and reports from the closing "
                       "date on ('Show closed' brings it back). Its record is kept; it can be reopened.")
        intro.setWordWrap(True)
        self.hint = QLabel(suggestion)
        self.hint.setWordWrap(True)
        self.hint.setVisible(bool(suggestion))
        self.date_edit = QDateEdit(qdate(day or dt.date.today()))
        self.date_edit.setCalendarPopup(True)
        self.date_edit.setDisplayFormat("yyyy-MM-dd")
        self.date_edit.setAccessibleName("Closed from this date")
        self.reason = QComboBox()
        self.reason.setAccessibleName("Reason for closing")
        for reason in CLOSE_REASONS:
            self.reason.addItem(REASON_TEXT.get(reason, reason), reason)
        form = QFormLayout()
        form.addRow("Closed from:", self.date_edit)
        form.addRow("Reason:", self.reason)
        self.error = QLabel("")
        self.error.setObjectName("formError")
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #B00020;")
        self.buttons = QDialogButtonBox(QDialogButtonBox.Cancel)
        self.ok_button = self.buttons.addButton("Close case", QDialogButtonBox.AcceptRole)
        self.ok_button.setDefault(True)
        self.buttons.accepted.connect(self.submit)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addWidget(self.hint)
        layout.addLayout(form)
        layout.addWidget(self.error)
        layout.addStretch(1)
        layout.addWidget(self.buttons)
        self.reason.setFocus()

    def submit(self) -> bool:
        from caseview.errors import CaseviewError
        from caseview.operations import casework

        try:
            self.result = casework.close_case(self.workspace, self.case_id, pydate(self.date_edit.date()),
                                              str(self.reason.currentData()), self.actor)
        except CaseviewError as exc:
            self.error.setText(str(exc))
            return False
        self.accept()
        return True
