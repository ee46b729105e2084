"""The case pane's case-work buttons and its closing hint; the panel only says what was asked for.

Signals carry the case ID (and, for a correction or void, the date of the contact selected in the
case's contact list); :class:`caseview.gui.casework_controller.CaseworkController` decides and
calls the application layer.
"""

from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QPushButton, QVBoxLayout, QWidget


class CaseActions(QWidget):
    """Record / correct / void / versions / close-or-reopen for the case on show."""

    record_requested = Signal(str)
    correct_requested = Signal(str, str)
    void_requested = Signal(str, str)
    versions_requested = Signal(str)
    close_requested = Signal(str)
    reopen_requested = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.case_id = ""
        self.contact_date = ""
        self.closed = False
        self.hint = QLabel("")
        self.hint.setObjectName("closingHint")
        self.hint.setWordWrap(True)
        self.hint.setAccessibleName("Hint about closing this case")
        self.hint.hide()
        self.record = QPushButton("Record contact…")
        self.record.setToolTip("Record what was seen at a visit (Ctrl+Shift+R)")
        self.correct = QPushButton("Correct…")
        self.correct.setToolTip("Correct the contact selected above; the recorded version is kept")
        self.void = QPushButton("Void…")
        self.void.setToolTip("Void the contact selected above (wrong case, or it never happened); it stays stored")
        self.versions = QPushButton("All versions…")
        self.versions.setToolTip("Every version of this case's contacts, with who changed what and why")
        self.close_button = QPushButton("Close case…")
        self.close_button.setObjectName("closeCaseButton")
        for button, name in ((self.record, "Record a contact for this case"),
                             (self.correct, "Correct the selected contact"),
                             (self.void, "Void the selected contact"),
                             (self.versions, "Show every version of the contacts"),
                             (self.close_button, "Close or reopen this case")):
            button.setAccessibleName(name)
        self.record.clicked.connect(lambda: self.record_requested.emit(self.case_id))
        self.correct.clicked.connect(lambda: self.correct_requested.emit(self.case_id, self.contact_date))
        self.void.clicked.connect(lambda: self.void_requested.emit(self.case_id, self.contact_date))
        self.versions.clicked.connect(lambda: self.versions_requested.emit(self.case_id))
        self.close_button.clicked.connect(
            lambda: (self.reopen_requested if self.closed else self.close_requested).emit(self.case_id))
        case_row, contact_row = QHBoxLayout(), QHBoxLayout()  # two rows: the side pane is narrow
        for button in (self.record, self.versions, self.close_button):
            case_row.addWidget(button)
        contact_row.addWidget(QLabel("Selected contact:"))
        for button in (self.correct, self.void):
            contact_row.addWidget(button)
        contact_row.addStretch(1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.hint)
        layout.addLayout(case_row)
        layout.addLayout(contact_row)
        self.show_case("", "", None)

    def show_case(self, case_id: str, suggestion: str, closure) -> None:
        """The case on show, the closing suggestion ('' for none) and its closure (or None)."""
        self.case_id = case_id or ""
        self.closed = closure is not None
        if closure is not None:
            from caseview.dates import from_day

            self.hint.setText(f"This case is closed from {from_day(closure.closed_day).isoformat()} "
                              f"({closure.reason}).")
        else:
            self.hint.setText(suggestion)
        self.hint.setVisible(bool(self.hint.text()))
        self.close_button.setText("Reopen case" if self.closed else "Close case…")
        for button in (self.record, self.versions, self.close_button):
            button.setEnabled(bool(self.case_id))
        self.set_contact("")

    def set_contact(self, date: str) -> None:
        """The date of the contact selected in the case's contact list ('' for none)."""
        self.contact_date = date or ""
        for button in (self.correct, self.void):
            button.setEnabled(bool(self.case_id and self.contact_date))
