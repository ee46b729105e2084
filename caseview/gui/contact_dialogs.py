"""Correct or void one contact (a reason is required), and list every version of a case's contacts.

Nothing recorded is destroyed: a correction keeps the earlier version (superseded) and a void keeps
the voided one, both listed in :class:`ContactVersionsDialog`. The dialogs call
:mod:`caseview.operations.casework`; a problem shows as one line and nothing is stored.
"""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QCheckBox, QDateEdit, QDialog, QDialogButtonBox, QFormLayout, QGroupBox, QLabel,
                               QLineEdit, QTableWidget, QTableWidgetItem, QVBoxLayout)

from .record_form import ContactFields, pydate, qdate

STATUS_TEXT = {"current": "current", "superseded": "superseded (corrected)", "voided": "voided"}


def _contact_summary(version) -> str:
    values = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in version.values.items() if v) or "nothing observed"
    known = f"; known stage {version.stage_known}" if version.stage_known else ""
    return f"{version.date}: {values}{known}"


class _ReasonDialog(QDialog):
    """Common parts: an error line, a required reason, and the buttons."""

    def __init__(self, title: str, action: str, parent=None, example: str = "falls were one, not several"):
        super().__init__(parent)
        self.setWindowTitle(title)
        self.result = None
        self.reason_edit = QLineEdit()
        self.reason_edit.setAccessibleName("Reason for the change (required)")
        self.reason_edit.setPlaceholderText(f"required, e.g. '{example}'")
        self.error = QLabel("")
        self.error.setObjectName("formError")
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #B00020;")
        self.buttons = QDialogButtonBox(QDialogButtonBox.Cancel)
        self.ok_button = self.buttons.addButton(action, QDialogButtonBox.AcceptRole)
        self.ok_button.setDefault(True)
        self.ok_button.setEnabled(False)
        self.reason_edit.textChanged.connect(lambda text: self.ok_button.setEnabled(bool(text.strip())))
        self.buttons.accepted.connect(self.submit)
        self.buttons.rejected.connect(self.reject)

    def submit(self) -> bool:
        from caseview.errors import CaseviewError

        try:
            self.result = self._apply()
        except CaseviewError as exc:
            self.error.setText(str(exc))
            return False
        self.accept()
        return True


class CorrectContactDialog(_ReasonDialog):
    """Correct the contact ``version`` (a current :class:`~caseview.operations.casework.ContactVersion`)."""

    def __init__(self, workspace, actor: str, version, parent=None):
        super().__init__(f"Correct a contact — {version.case_id}", "Correct", parent)
        self.workspace, self.actor, self.version = workspace, actor, version
        model, _ = workspace.current_model()
        self.resize(520, 470)
        who = f" by {version.recorded_by}" if version.recorded_by else " (imported)"
        intro = QLabel(f"Recorded{who}: {_contact_summary(version)}.\nThe recorded version is kept and listed as "
                       "superseded; estimates use the corrected one.")
        intro.setWordWrap(True)
        top = QFormLayout()
        self.date_edit = QDateEdit(qdate(_as_date(version.date)))
        self.date_edit.setCalendarPopup(True)
        self.date_edit.setDisplayFormat("yyyy-MM-dd")
        self.date_edit.setAccessibleName("Date of the contact (change it to move the contact)")
        top.addRow("Date:", self.date_edit)
        box = QGroupBox("Corrected values")
        self.fields = ContactFields(model, QFormLayout(box))
        self.fields.fill(version.values, version.covariates, version.stage_known, version.contact_kind)
        bottom = QFormLayout()
        bottom.addRow("Reason:", self.reason_edit)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(top)
        layout.addWidget(box)
        layout.addLayout(bottom)
        layout.addWidget(self.error)
        layout.addStretch(1)
        layout.addWidget(self.buttons)
        self.fields.widgets()[0].setFocus(Qt.OtherFocusReason)

    def _apply(self):
        from caseview.operations import casework

        new_date = pydate(self.date_edit.date())
        return casework.correct_contact(
            self.workspace, self.version.case_id, self.version.date, self.reason_edit.text(), self.actor,
            new_date=new_date if new_date.isoformat() != self.version.date else None,
            values=self.fields.values(), covariates=self.fields.covariate_texts(),
            stage_known=self.fields.stage_known(), contact_kind=self.fields.contact_kind(), source="correct")


class VoidContactDialog(_ReasonDialog):
    """Void the contact ``version`` (recorded under the wrong case, or it never happened)."""

    def __init__(self, workspace, actor: str, version, parent=None):
        super().__init__(f"Void a contact — {version.case_id}", "Void contact", parent,
                         example="recorded under the wrong case")
        self.workspace, self.actor, self.version = workspace, actor, version
        self.resize(520, 240)
        intro = QLabel(f"Void this contact? It stops counting for estimates, fitting and exports, and stays "
                       f"stored and listed as voided.\n\n{_contact_summary(version)}")
        intro.setWordWrap(True)
        form = QFormLayout()
        form.addRow("Reason:", self.reason_edit)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(form)
        layout.addWidget(self.error)
        layout.addStretch(1)
        layout.addWidget(self.buttons)
        self.reason_edit.setFocus(Qt.OtherFocusReason)

    def _apply(self):
        from caseview.operations import casework

        return casework.void_contact(self.workspace, self.version.case_id, self.version.date,
                                     self.reason_edit.text(), self.actor)


class ContactVersionsDialog(QDialog):
    """Every version of a case's contacts: current, superseded and voided, with who, when and why."""

    def __init__(self, workspace, case_id: str, parent=None):
        super().__init__(parent)
        from caseview.operations import casework

        self.setWindowTitle(f"Contacts and their versions — {case_id}")
        self.resize(1320, 520)
        model, _ = workspace.current_model()
        self.versions = casework.list_contacts(workspace, case_id, all_versions=True)
        self.show_all = QCheckBox("Show superseded and voided versions")
        self.show_all.setChecked(True)
        self.table = QTableWidget(0, 0)
        self.table.setAccessibleName("Versions of the case's contacts")
        self.table.setEditTriggers(QTableWidget.NoEditTriggers)
        self.table.verticalHeader().hide()
        self.channels = [c.name for c in model.channels]
        self.covariates = list(model.covariates)
        self.show_all.toggled.connect(self._fill)
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("Corrections and voids never remove what was recorded; earlier versions stay "
                                "here (newest first)."))
        layout.addWidget(self.show_all)
        layout.addWidget(self.table, 1)
        layout.addWidget(buttons)
        self._fill()

    def _fill(self) -> None:
        # newest first, so the latest changes are in view
        rows = [v for v in reversed(self.versions) if self.show_all.isChecked() or v.status == "current"]
        headers = (["Date", "Status"] + [c.replace("_", " ") for c in self.channels]
                   + [c.replace("_", " ") for c in self.covariates]
                   + ["Known stage", "Recorded", "Recorded by", "Changed", "Changed by", "Reason"])
        self.table.setColumnCount(len(headers))
        self.table.setHorizontalHeaderLabels(headers)
        self.table.setRowCount(len(rows))
        for i, v in enumerate(rows):
            reason = v.reason if v.status != "current" else v.recorded_reason
            if reason == "import" and not v.recorded_at:
                reason = ""  # an imported contact: "(imported)" says it
            cells = ([v.date, STATUS_TEXT.get(v.status, v.status)] + [v.values.get(c, "") or "–" for c in self.channels]
                     + ["" if v.covariates.get(c) is None else f"{v.covariates[c]:g}" for c in self.covariates]
                     + [v.stage_known, _when(v.recorded_at) or "(imported)", v.recorded_by, _when(v.ended_at),
                        v.ended_by, reason])
            for j, text in enumerate(cells):
                item = QTableWidgetItem(text)
                if v.status != "current":  # earlier versions in italics; "voided" struck through
                    font = item.font()
                    font.setItalic(True)
                    font.setStrikeOut(v.status == "voided" and j == 1)
                    item.setFont(font)
                self.table.setItem(i, j, item)
        self.table.resizeColumnsToContents()


def _when(utc_text: str) -> str:
    """'2026-12-03T09:55:01.123Z' -> '2026-12-03 09:55 UTC' ('' stays '')."""
    return f"{utc_text[:16].replace('T', ' ')} UTC" if utc_text else ""


def _as_date(text: str):
    import datetime as dt

    return dt.date.fromisoformat(text)
