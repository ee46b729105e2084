"""Record a contact after a visit, or add a person (a new case with its first contact).

Keyboard first: the first empty field has the focus, Tab walks the fields in reading order, each
channel is a list whose first letter picks a category, Enter records and Escape cancels. The date
starts at today; covariates start at the values of the case's previous contact; the coordinator
field matters for a new case. The form only gathers text: :func:`caseview.operations.casework.record_contact`
checks it with the import's rules and stores it (one audited transaction), and a problem shows as
one line in the form with nothing stored.
"""

from __future__ import annotations

import datetime as dt

from PySide6.QtCore import QDate, Qt
from PySide6.QtWidgets import (QComboBox, QDateEdit, QDialog, QDialogButtonBox, QFormLayout, QGroupBox, QLabel,
                               QLineEdit, QVBoxLayout)

from caseview import ADVISORY_NOTICE

NOT_OBSERVED = "(not observed)"
NOT_KNOWN = "(not known)"


def _number_text(value) -> str:
    return "" if value is None else f"{float(value):g}"


class ContactFields:
    """The value fields shared by the record and correction forms (channels, covariates, known stage)."""

    def __init__(self, model, form: QFormLayout):
        self.model = model
        self.channels = {}
        for channel in model.channels:
            combo = QComboBox()
            combo.addItem(NOT_OBSERVED, "")
            for category in channel.categories:
                combo.addItem(category, category)
            combo.setAccessibleName(f"{channel.name.replace('_', ' ')}: recorded category")
            form.addRow(f"{channel.name.replace('_', ' ').capitalize()}:", combo)
            self.channels[channel.name] = combo
        self.covariates = {}
        for name in model.covariates:
            edit = QLineEdit()
            edit.setAccessibleName(f"{name.replace('_', ' ')}: number")
            edit.setPlaceholderText("a number")
            form.addRow(f"{name.replace('_', ' ').capitalize()}:", edit)
            self.covariates[name] = edit
        self.stage = QComboBox()
        self.stage.addItem(NOT_KNOWN, "")
        for stage in model.stages:
            self.stage.addItem(stage, stage)
        self.stage.setAccessibleName("Stage known at this contact (optional)")
        form.addRow("Known stage:", self.stage)
        self.kind = QComboBox()
        self.kind.addItem("Scheduled (a planned visit)", "scheduled")
        self.kind.addItem("Unscheduled (a fall, a worried call)", "unscheduled")
        self.kind.setAccessibleName("Kind of contact: scheduled or unscheduled")
        form.addRow("Kind of contact:", self.kind)

    def widgets(self) -> list:
        return [*self.channels.values(), *self.covariates.values(), self.stage, self.kind]

    def fill(self, values: dict, covariates: dict, stage_known: str = "", contact_kind: str = "scheduled") -> None:
        for name, combo in self.channels.items():
            combo.setCurrentIndex(max(0, combo.findData(values.get(name, "") or "")))
        for name, edit in self.covariates.items():
            edit.setText(_number_text(covariates.get(name)))
        self.stage.setCurrentIndex(max(0, self.stage.findData(stage_known or "")))
        self.kind.setCurrentIndex(max(0, self.kind.findData(contact_kind or "scheduled")))

    def values(self) -> dict:
        return {name: str(combo.currentData() or "") for name, combo in self.channels.items()}

    def covariate_texts(self) -> dict:
        """Covariates as typed; a blank field is left out (carried over by ``record_contact``)."""
        return {name: edit.text().strip() for name, edit in self.covariates.items() if edit.text().strip()}

    def stage_known(self) -> str:
        return str(self.stage.currentData() or "")

    def contact_kind(self) -> str:
        """'scheduled' or 'unscheduled' as chosen."""
        return str(self.kind.currentData() or "scheduled")


def qdate(day: dt.date) -> QDate:
    return QDate(day.year, day.month, day.day)


def pydate(value: QDate) -> dt.date:
    return dt.date(value.year(), value.month(), value.day())


class RecordForm(QDialog):
    """Record a contact for ``case_id`` (existing) or, with ``case_id=None``, add a new person.

    ``result`` holds the :class:`caseview.operations.casework.RecordResult` after a successful record.
    """

    def __init__(self, workspace, actor: str, case_id: str | None = None, today: dt.date | None = None,
                 parent=None):
        super().__init__(parent)
        from caseview.operations import casework

        self.workspace, self.actor = workspace, actor
        self.adding = case_id is None
        self.result = None
        self.model, _ = workspace.current_model()
        self.setWindowTitle("Add a person" if self.adding else f"Record a contact — {case_id}")
        self.setObjectName("recordForm")
        self.resize(520, 470)

        intro = QLabel("A new case starts with its first contact. Give a pseudonymous case ID (never a name) "
                       "and the coordinator." if self.adding else
                       "What was seen at the visit. Covariates start at the previous contact's values.")
        intro.setWordWrap(True)
        form = QFormLayout()
        form.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)
        self.case_edit = QLineEdit(case_id or "")
        self.case_edit.setAccessibleName("Case ID")
        self.case_edit.setPlaceholderText("e.g. HS-0123")
        self.case_edit.setReadOnly(not self.adding)
        if not self.adding:
            self.case_edit.setFrame(False)  # shown, not edited: the contact belongs to this case
            self.case_edit.setFocusPolicy(Qt.NoFocus)
        form.addRow("Case ID:", self.case_edit)
        self.coordinator_edit = QLineEdit()
        self.coordinator_edit.setAccessibleName("Coordinator code")
        self.coordinator_edit.setPlaceholderText("e.g. C2" + ("" if self.adding else " (blank: unchanged)"))
        form.addRow("Coordinator:", self.coordinator_edit)
        self.date_edit = QDateEdit(qdate(today or dt.date.today()))
        self.date_edit.setCalendarPopup(True)
        self.date_edit.setDisplayFormat("yyyy-MM-dd")
        self.date_edit.setAccessibleName("Date of the contact")
        form.addRow("Date:", self.date_edit)
        values_box = QGroupBox("Recorded at the contact")
        values_form = QFormLayout(values_box)
        self.fields = ContactFields(self.model, values_form)
        self.previous_note = QLabel("")
        self.previous_note.setWordWrap(True)
        self.previous_note.setObjectName("previousNote")
        self.error = QLabel("")
        self.error.setObjectName("formError")
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #B00020;")
        self.error.setAccessibleName("Problem with the form")
        advisory = QLabel(ADVISORY_NOTICE)
        advisory.setWordWrap(True)
        advisory.setObjectName("formAdvisory")
        self.buttons = QDialogButtonBox(QDialogButtonBox.Cancel)
        self.record_button = self.buttons.addButton("Add person" if self.adding else "Record",
                                                    QDialogButtonBox.AcceptRole)
        self.record_button.setDefault(True)
        self.buttons.accepted.connect(self.submit)
        self.buttons.rejected.connect(self.reject)

        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(form)
        layout.addWidget(values_box)
        layout.addWidget(self.previous_note)
        layout.addWidget(self.error)
        layout.addWidget(advisory)
        layout.addStretch(1)
        layout.addWidget(self.buttons)
        order = [self.case_edit, self.coordinator_edit, self.date_edit, *self.fields.widgets(), self.record_button]
        if not self.adding:
            order = order[1:]
        for first, second in zip(order, order[1:]):
            self.setTabOrder(first, second)
        self._casework = casework
        if not self.adding:
            self._prefill(case_id)
        (self.case_edit if self.adding else self.fields.widgets()[0]).setFocus(Qt.OtherFocusReason)

    def _prefill(self, case_id: str) -> None:
        defaults = self._casework.contact_form_defaults(self.workspace, case_id, pydate(self.date_edit.date()))
        self.fields.fill({}, defaults["covariates"])
        if defaults["covariates"]:
            previous = defaults.get("previous_date", "")
            since = f" ({previous})" if previous else ""
            self.previous_note.setText(f"Covariates are those of the previous contact{since}; change any that "
                                       "changed.")
        if defaults["closed"] is not None:
            closed = defaults["closed"]
            self.previous_note.setText(f"This case is closed (since {_iso(closed.closed_day)}, {closed.reason}); "
                                       "reopen it before recording a contact on or after that date.")

    def submit(self) -> bool:
        """Record (or add); on a problem show it in one line and keep the form open (nothing stored)."""
        from caseview.errors import CaseviewError

        kwargs = dict(values=self.fields.values(), covariates=self.fields.covariate_texts(),
                      stage_known=self.fields.stage_known(), coordinator=self.coordinator_edit.text().strip() or None,
                      contact_kind=self.fields.contact_kind())
        try:
            if self.adding:
                self.result = self._casework.add_case(
                    self.workspace, self.case_edit.text().strip(), kwargs.pop("coordinator") or "",
                    pydate(self.date_edit.date()), self.actor, source="add a person", **kwargs)
            else:
                self.result = self._casework.record_contact(
                    self.workspace, self.case_edit.text().strip(), pydate(self.date_edit.date()), self.actor,
                    source="record", new_case=False, **kwargs)
        except CaseviewError as exc:
            self.error.setText(str(exc))
            return False
        self.accept()
        return True


def _iso(day: int) -> str:
    from caseview.dates import day_text

    return day_text(day)
