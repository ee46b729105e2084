"""Risk queue: flagged cases in priority order with reasons, reviews, and the supervisor's view."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QAbstractItemView, QGroupBox, QHBoxLayout, QInputDialog, QLabel, QLineEdit,
                               QListWidget, QPushButton, QSplitter, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from caseview.scoring import from_day

QUEUE_LIMIT = 500  # rows shown in the queue; the caseload table shows every flagged case
COLUMNS = ("Case", "Coordinator", "Follow-up now", "Reach follow-up", "Next contact due", "Review", "Rules that fired")


class RiskQueue(QWidget):
    """Needs ``caseview.followup`` and a workspace; shows a calm placeholder otherwise."""

    review_recorded = Signal(str, str)  # case ID, new status

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window
        self.loaded = None
        self.rows = np.zeros(0, dtype=np.int64)
        self.placeholder = QLabel("Follow-up flags are not available yet: open a workspace to see flagged cases.")
        self.placeholder.setWordWrap(True)
        self.table = QTableWidget(0, len(COLUMNS))
        self.table.setObjectName("riskQueueTable")
        self.table.setAccessibleName("Flagged cases in priority order")
        self.table.setHorizontalHeaderLabels(COLUMNS)
        self.table.verticalHeader().hide()
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setWordWrap(False)
        self.table.verticalHeader().setDefaultSectionSize(self.fontMetrics().height() + 10)
        self.table.itemSelectionChanged.connect(self._selection_changed)
        self.table.doubleClicked.connect(self._open_case)
        self.reasons = QLabel("")
        self.reasons.setWordWrap(True)
        self.reasons.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.note = QLineEdit(placeholderText="Note for the review (required to dismiss)")
        self.note.setAccessibleName("Review note")
        self.acknowledge = QPushButton("Acknowledge")
        self.action = QPushButton("Mark actioned")
        self.dismiss = QPushButton("Dismiss…")
        for button, status, key in ((self.acknowledge, "acknowledged", "Alt+A"), (self.action, "actioned", "Alt+C"),
                                    (self.dismiss, "dismissed", "Alt+D")):
            button.setAccessibleName(f"Set review status {status}")
            button.setShortcut(key)
            button.clicked.connect(lambda _=False, s=status: self.review_selected(s))
        buttons = QHBoxLayout()
        buttons.addWidget(self.note, 1)
        for b in (self.acknowledge, self.action, self.dismiss):
            buttons.addWidget(b)
        self.audit_list = QListWidget()
        self.audit_list.setAccessibleName("Audit entries of the selected case")

        left = QWidget()
        left_layout = QVBoxLayout(left)
        left_layout.setContentsMargins(0, 0, 0, 0)
        self.heading = QLabel("")
        left_layout.addWidget(self.heading)
        left_layout.addWidget(self.placeholder)
        left_layout.addWidget(self.table, 1)
        left_layout.addWidget(self.reasons)
        left_layout.addLayout(buttons)
        left_layout.addWidget(QLabel("Audit trail of this case"))
        left_layout.addWidget(self.audit_list)

        supervisor = QGroupBox("Supervisor view")
        sup = QVBoxLayout(supervisor)
        self.by_coordinator = QTableWidget(0, 5)
        self.by_coordinator.setAccessibleName("Reviews by coordinator and status")
        self.by_coordinator.setHorizontalHeaderLabels(["Coordinator", "new", "acknowledged", "actioned", "dismissed"])
        self.by_coordinator.verticalHeader().hide()
        self.by_coordinator.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.overdue = QLabel("")
        self.overdue.setWordWrap(True)
        self.audit_status = QLabel("Audit trail: not checked yet")
        self.audit_status.setWordWrap(True)
        self.audit_status.setAccessibleName("Audit verification result")
        verify = QPushButton("Verify audit trail")
        verify.clicked.connect(self.verify_audit)
        sup.addWidget(QLabel("Flag reviews by coordinator and status"))
        sup.addWidget(self.by_coordinator, 1)
        sup.addWidget(self.overdue)
        sup.addWidget(self.audit_status)
        sup.addWidget(verify)

        split = QSplitter(Qt.Horizontal)
        split.addWidget(left)
        split.addWidget(supervisor)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 1)
        supervisor.setMinimumWidth(430)
        layout = QVBoxLayout(self)
        layout.addWidget(split)
        self._set_available(False)

    def _set_available(self, on: bool) -> None:
        self.placeholder.setVisible(not on)
        for w in (self.table, self.acknowledge, self.action, self.dismiss, self.note):
            w.setEnabled(on)

    # -------------------------------------------------------------------- filling
    def set_caseload(self, loaded) -> None:
        self.loaded = loaded
        a = loaded.assessment
        if a is None:
            self.placeholder.setText("Follow-up flags are not available yet; the caseload table is ordered by "
                                     "the chance of reaching a follow-up stage.")
            self._set_available(False)
            self.table.setRowCount(0)
            return
        self._set_available(True)
        flagged = np.flatnonzero(np.asarray(a.is_flagged, dtype=bool))
        order = flagged[np.argsort(-np.asarray(a.priority)[flagged], kind="stable")]
        self.rows = order[:QUEUE_LIMIT]
        more = f" (showing the first {QUEUE_LIMIT})" if order.size > QUEUE_LIMIT else ""
        self.heading.setText(f"<b>{order.size:,} flagged cases</b>, most urgent first{more}. "
                             "Select one to see why it is flagged and record a review.")
        self.table.setRowCount(self.rows.size)
        for i, r in enumerate(self.rows):
            self._fill_row(i, int(r))
        self.table.resizeColumnsToContents()
        
        self._fill_supervisor()
        if self.rows.size:
            self.table.selectRow(0)

    def _fill_row(self, i: int, r: int) -> None:
        a, s = self.loaded.assessment, self.loaded.scores
        due = int(a.next_contact_due_day[r])
        due_text = "not within limit" if due < 0 else ("now" if due <= s.as_of_day else from_day(due).isoformat())
        values = (s.case_ids[r], s.coordinators[r] or "-", f"{s.p_follow_up_now[r] * 100:.0f}%",
                  f"{s.p_reach_follow_up[r] * 100:.0f}%", due_text, a.review_status[r] or "new",
                  str(a.flags[r]).replace("_", " ").replace(";", ", "))
        for j, v in enumerate(values):
            item = QTableWidgetItem(str(v))
            if j == len(values) - 1:
                item.setToolTip(self._reason_tip(r))
            self.table.setItem(i, j, item)

    def _reason_tip(self, r: int) -> str:
        a = self.loaded.assessment
        if _has_reasons(a, r):
            return str(a.reason_text[r])
        return "Working out why this case is flagged… select it to see the reasons now."

    def _update_tips(self, case_rows) -> None:
        last = len(COLUMNS) - 1
        for i in np.flatnonzero(np.isin(self.rows, case_rows)):
            item = self.table.item(int(i), last)
            if item is not None:
                item.setToolTip(self._reason_tip(int(self.rows[i])))

    def reasons_arrived(self, case_rows) -> None:
        """Reasons for ``case_rows`` were just worked out (by the window's background job)."""
        if self.loaded is None or self.loaded.assessment is None or not self.rows.size:
            return
        self._update_tips(case_rows)
        selected = self.selected_row()
        if selected >= 0 and selected in set(np.asarray(case_rows).tolist()):
            self._selection_changed()

    def _fill_supervisor(self) -> None:
        a, s = self.loaded.assessment, self.loaded.scores
        # work on the flagged cases only (object-array comparisons over 100,000 cases add up)
        flagged_rows = np.flatnonzero(np.asarray(a.is_flagged, dtype=bool))
        status = np.asarray(a.review_status, dtype=object)[flagged_rows]
        status = np.where(status == "", "new", status)
        owners = np.asarray(s.coordinators, dtype=object)[flagged_rows]
        coordinators = sorted({str(c) for c in owners})
        self.by_coordinator.setRowCount(len(coordinators))
        for i, c in enumerate(coordinators):
            mine = owners == c
            self.by_coordinator.setItem(i, 0, QTableWidgetItem(c or "-"))
            for j, st in enumerate(("new", "acknowledged", "actioned", "dismissed")):
                item = QTableWidgetItem(str(int((status[mine] == st).sum())))
                item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                self.by_coordinator.setItem(i, j + 1, item)
        due = np.asarray(a.next_contact_due_day)[flagged_rows]
        overdue = (due >= 0) & (due <= s.as_of_day) & (status == "new")
        self.overdue.setText(f"<b>{int(overdue.sum()):,} overdue flags</b>: a contact is due on or before "
                             f"{s.as_of.isoformat()} and nobody has reviewed the flag yet.")
        self.by_coordinator.resizeColumnsToContents()

    # -------------------------------------------------------------------- actions
    def selected_row(self) -> int:
        items = self.table.selectionModel().selectedRows() if self.table.selectionModel() else []
        return int(self.rows[items[0].row()]) if items else -1

    def _selection_changed(self) -> None:
        r = self.selected_row()
        if r < 0 or self.loaded is None or self.loaded.assessment is None:
            return
        a = self.loaded.assessment
        if not _has_reasons(a, r):
            a.explain_cases([r])  # one case: a few milliseconds; the background job may not have got here yet
            self._update_tips([r])
        lines = [f"<b>{self.loaded.scores.case_ids[r]}</b> — why flagged:"]
        contacts, seen_dates = [], set()
        for reason in a.reasons[r]:
            lines.append(f"• {reason.rule.replace('_', ' ')}: {reason.message}")
            for c in reason.contacts:
                if getattr(c, "date", None) in seen_dates:
                    continue
                seen_dates.add(getattr(c, "date", None))
                contacts.append(c.describe() if hasattr(c, "describe") else str(c))
        if contacts:
            lines.append("Effect of each of the last contacts, largest first (chance of follow-up with that contact "
                         "minus without it): " + "; ".join(contacts[:4]))
        self.reasons.setText("<br>".join(lines))
        self._update_buttons(a.review_status[r] or "new")
        self._fill_audit(str(self.loaded.scores.case_ids[r]))

    def _update_buttons(self, current: str) -> None:
        try:
            from caseview.followup import ALLOWED_CHANGES
        except ImportError:
            ALLOWED_CHANGES = {}
        allowed = ALLOWED_CHANGES.get(current, ())
        self.acknowledge.setEnabled("acknowledged" in allowed)
        self.action.setEnabled("actioned" in allowed)
        self.dismiss.setEnabled("dismissed" in allowed)

    def _fill_audit(self, case_id: str) -> None:
        self.audit_list.clear()
        ws = self.window.workspace()
        if ws is None:
            self.audit_list.addItem("(no workspace: audit trail not available)")
            return
        entries = ws.audit_entries(case_id=case_id)[-20:]
        if not entries:
            self.audit_list.addItem("(no audit entries for this case yet)")
        for e in entries:
            note = e.details.get("note", "") if isinstance(e.details, dict) else ""
            self.audit_list.addItem(f"{e.at_utc}  {e.actor}  {e.action}" + (f"  — {note}" if note else ""))

    def review_selected(self, status: str, note: str | None = None) -> bool:
        """Record a review of the selected case (asks for a reason when dismissing)."""
        r = self.selected_row()
        ws = self.window.workspace()
        if r < 0 or ws is None:
            return False
        note = self.note.text().strip() if note is None else note
        if status == "dismissed" and not note:
            note, ok = QInputDialog.getText(self, "Dismiss flag", "Reason for dismissing this flag (required):")
            note = note.strip()
            if not ok or not note:
                return False
        from caseview.errors import CaseviewError
        from caseview.followup import record_review

        case_id = str(self.loaded.scores.case_ids[r])
        try:
            row = record_review(ws, case_id, status, note, self.window.actor, self.loaded.assessment)
        except CaseviewError as exc:
            self.window.show_error(str(exc))
            return False
        except Exception as exc:  # a failed write is never silent (issue 12, item 1)
            self.window.show_error(f"review of {case_id} was not recorded: {type(exc).__name__}: {exc}")
            return False
        new_status = getattr(row, "status", status)
        self.loaded.assessment.review_status[r] = new_status
        self.window.caseload.model.set_review_status(r, new_status)
        i = int(np.flatnonzero(self.rows == r)[0])
        self._fill_row(i, r)
        self._fill_supervisor()
        self._update_buttons(new_status)
        self._fill_audit(case_id)
        self.note.clear()
        self.window.statusBar().showMessage(f"Review recorded: {case_id} is now {new_status}.")
        self.review_recorded.emit(case_id, new_status)
        return True

    def verify_audit(self) -> None:
        ws = self.window.workspace()
        if ws is None:
            self.audit_status.setText("Audit trail: no workspace open.")
            return
        result = ws.audit_verify()
        if result.ok:
            self.audit_status.setText(f"Audit trail intact: {result.n_entries:,} entries, head {result.head_hash[:12]}…")
        else:
            self.audit_status.setText(f"<b>Audit trail check FAILED</b> at entry {result.first_bad_id}: {result.problem}")

    def _open_case(self, index) -> None:
        r = int(self.rows[index.row()])
        self.window.tabs.setCurrentIndex(0)
        self.window.caseload.select_case(str(self.loaded.scores.case_ids[r]))


def _has_reasons(assessment, r: int) -> bool:
    """True when the reasons of case row ``r`` are worked out (always, for assessments without lazy reasons)."""
    has = getattr(assessment, "has_reasons", None)
    return True if has is None else has(r)
