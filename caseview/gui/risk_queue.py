"""Risk queue: flagged cases with reasons and reviews, filters, and the supervisor's counts.

Every flagged case is listed (no cap): the table is a model over an index array
(:mod:`caseview.gui.risk_queue_model`). Order and counts come from :mod:`caseview.followup.queue`
(unreviewed flags first, then acknowledged, then closed; most urgent first within each). The panel
shows state and emits signals; the window updates the caseload table and opens cases.
"""

from __future__ import annotations

import html

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QComboBox, QGroupBox, QHBoxLayout, QHeaderView,
                               QInputDialog, QLabel, QLineEdit, QListWidget, QPushButton, QSplitter, QTableView,
                               QVBoxLayout, QWidget)

from caseview.followup.queue import QUEUE_STATUSES, case_in_queue, case_is_overdue, case_status, queue_rows
from caseview.followup.wording import plural

from .risk_queue_model import COLUMNS, RULES, RiskQueueModel
from .supervisor_counts import SupervisorCounts

ALL = "*"  # combo data meaning "no filter" (never None: see caseload_panel.ProbabilityDelegate)
#: The queue's first rows get their reasons worked out first, as one step of the window's reasons job
#: (a few screenfuls; the rest follow in priority order, and a selected case is explained at once).
FIRST_REASONS = 500


class RiskQueue(QWidget):
    """Needs ``caseview.followup`` and a workspace; shows a calm placeholder otherwise."""

    review_recorded = Signal(str, str)        # case ID, new status
    review_saved = Signal(int, str, str)      # case row, new status, note (the window updates the table)
    open_case_requested = Signal(str)         # case ID (double click)
    reopen_requested = Signal()               # re-open the dismissed flags whose risk rose (explicit, audited)

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window  # for the workspace, the actor and error messages only
        self.loaded = None
        self.model = RiskQueueModel(self)
        self.placeholder = QLabel("Open a workspace to see its flagged cases.")
        self.placeholder.setWordWrap(True)
        self.coordinator = QComboBox()
        self.coordinator.setAccessibleName("Show the flags of one coordinator")
        self.status = QComboBox()
        self.status.setAccessibleName("Show flags with one review status")
        self.status.addItem("Any review status", ALL)
        for status in QUEUE_STATUSES:
            self.status.addItem("new (not reviewed)" if status == "new" else status, status)
        self.overdue_only = QCheckBox("Overdue only")
        self.overdue_only.setAccessibleName("Show only overdue flags nobody has reviewed")
        for combo in (self.coordinator, self.status):
            combo.setSizeAdjustPolicy(QComboBox.AdjustToContents)
            combo.currentIndexChanged.connect(lambda _: self.apply_filters())
        self.overdue_only.toggled.connect(lambda _: self.apply_filters())
        filters = QHBoxLayout()
        for w in (self.coordinator, self.status, self.overdue_only):
            filters.addWidget(w)
        filters.addStretch(1)

        self.table = QTableView()
        self.table.setObjectName("riskQueueTable")
        self.table.setAccessibleName("Flagged cases, unreviewed first, most urgent first")
        self.table.setModel(self.model)
        self.table.verticalHeader().hide()
        self.table.verticalHeader().setSectionResizeMode(QHeaderView.Fixed)  # uniform rows: O(1) at any size
        self.table.verticalHeader().setDefaultSectionSize(self.fontMetrics().height() + 10)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setWordWrap(False)
        for column, width in enumerate((88, 88, 105, 120, 140, 90, 130, 200)):
            self.table.setColumnWidth(column, width)
        self.table.selectionModel().selectionChanged.connect(lambda *_: self._selection_changed())
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
        self.audit_list.setAccessibleName("Audit entries of the selected case, with review notes")

        left = QWidget()
        left_layout = QVBoxLayout(left)
        left_layout.setContentsMargins(0, 0, 0, 0)
        self.heading = QLabel("")
        self.heading.setWordWrap(True)
        left_layout.addWidget(self.heading)
        left_layout.addLayout(filters)
        left_layout.addWidget(self.placeholder)
        left_layout.addWidget(self.table, 1)
        left_layout.addWidget(self.reasons)
        left_layout.addLayout(buttons)
        left_layout.addWidget(QLabel("Audit trail of this case (reviews with their notes)"))
        left_layout.addWidget(self.audit_list)

        supervisor = QGroupBox("Supervisor view")
        sup = QVBoxLayout(supervisor)
        self.supervisor = SupervisorCounts()
        self.by_coordinator, self.overdue = self.supervisor.table, self.supervisor.overdue
        self.by_coordinator.cellClicked.connect(self._coordinator_clicked)
        self.overdue.linkActivated.connect(lambda _: self.show_overdue())
        self.reopen_button = QPushButton("")
        self.reopen_button.setAccessibleName("Re-open dismissed flags whose risk rose")
        self.reopen_button.clicked.connect(self.reopen_requested.emit)
        self.reopen_button.hide()
        self.audit_status = QLabel("Audit trail: not checked yet")
        self.audit_status.setWordWrap(True)
        self.audit_status.setAccessibleName("Audit verification result")
        verify = QPushButton("Verify audit trail")
        verify.clicked.connect(self.verify_audit)
        sup.addWidget(QLabel("Flags by coordinator and review status (click a row to list them)"))
        sup.addWidget(self.by_coordinator, 1)
        sup.addWidget(self.overdue)
        sup.addWidget(self.reopen_button)
        sup.addWidget(self.audit_status)
        sup.addWidget(verify)

        split = QSplitter(Qt.Horizontal)
        split.addWidget(left)
        split.addWidget(supervisor)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 1)
        supervisor.setMinimumWidth(440)
        split.setSizes([940, 440])
        layout = QVBoxLayout(self)
        layout.addWidget(split)
        self._set_available(False)

    @property
    def rows(self) -> np.ndarray:
        """Case rows listed now, in order (shape (m,))."""
        return self.model.rows

    def _set_available(self, on: bool) -> None:
        self.placeholder.setVisible(not on)
        for w in (self.table, self.acknowledge, self.action, self.dismiss, self.note, self.coordinator,
                  self.status, self.overdue_only):
            w.setEnabled(on)

    # -------------------------------------------------------------------- filling
    def set_caseload(self, loaded) -> None:
        self.loaded = loaded
        a = loaded.assessment
        self._set_available(True)
        self.coordinator.blockSignals(True)
        current = self.coordinator.currentData() if self.coordinator.count() else ALL
        self.coordinator.clear()
        self.coordinator.addItem("All coordinators", ALL)
        for name in sorted({str(c) for c in a.scores.coordinators[np.asarray(a.is_flagged, dtype=bool)]}):
            self.coordinator.addItem(name or "-", name)
        self.coordinator.setCurrentIndex(max(0, self.coordinator.findData(current)))
        self.coordinator.blockSignals(False)
        self._fill_supervisor()
        n = len(loaded.reopen_candidates)
        self.reopen_button.setText(f"Re-open {plural(n, 'dismissed flag')} whose risk rose since dismissal…")
        self.reopen_button.setToolTip(", ".join(f"{c}: {before:.0%} → {now:.0%}"
                                                for c, before, now in loaded.reopen_candidates[:20]))
        self.reopen_button.setVisible(n > 0)
        self.apply_filters()

    def apply_filters(self) -> None:
        """List the flagged cases that pass the filters (all of them, in queue order)."""
        a = self.loaded.assessment if self.loaded is not None else None
        if a is None:
            return
        keep = self.selected_row()
        coordinator = self.coordinator.currentData()
        status = self.status.currentData()
        rows = queue_rows(a, None if coordinator == ALL else coordinator, None if status == ALL else status,
                          self.overdue_only.isChecked())
        self.model.set_rows(a, rows)
        self._show_heading(a)
        i = self.model.view_row_of(keep) if keep >= 0 else -1
        if i >= 0 or rows.size:
            self.table.selectRow(max(i, 0))
        else:
            self.reasons.setText("No flagged case matches these filters.")

    def _show_heading(self, a) -> None:
        total, listed = int(np.count_nonzero(a.is_flagged)), int(self.rows.size)
        shown = "all of them" if listed == total else f"{listed:,} shown"
        self.heading.setText(f"<b>{plural(total, 'flagged case')}</b> ({shown}): not yet reviewed first, then "
                             "acknowledged, then actioned or dismissed; most urgent first within each. Select one "
                             "to see why it is flagged and record a review.")

    # -------------------------------------------------------------------- one case rescored
    def case_state(self, row: int):
        """What the queue shows of case ``row`` now (pass it to :meth:`update_case` after rescoring
        the case): ``(flagged, coordinator, status, overdue)``, or None without flags."""
        a = self.loaded.assessment if self.loaded is not None else None
        if a is None or not 0 <= row < a.scores.n_cases:
            return None
        return self._state_of(a, row)

    def update_case(self, loaded, row: int, before) -> None:
        """Case ``row`` of the shown caseload was rescored (same cases; ``before`` from :meth:`case_state`).

        Inserts, removes or moves its one row of the queue and adjusts the supervisor's counts, so
        the queue shows the new estimate without being refilled (a refill sorts every flagged case
        and counts every coordinator again: tens of milliseconds at 100,000 cases). Falls back to
        :meth:`set_caseload` when the coordinator list would change.
        """
        if before is None or loaded.assessment is None or self.loaded is None or self.loaded.assessment is None:
            self.set_caseload(loaded)
            return
        self.loaded = loaded
        a = loaded.assessment
        if not self.supervisor.adjust(before, self._state_of(a, row)):
            self.set_caseload(loaded)
            return
        coordinator, status = self.coordinator.currentData(), self.status.currentData()
        listed = case_in_queue(a, row, None if coordinator == ALL else coordinator, None if status == ALL else status,
                               self.overdue_only.isChecked())
        selected = self.selected_row()
        self.model.update_case(a, row, listed)
        self._show_heading(a)
        if self.selected_row() < 0 and self.rows.size:
            self.table.selectRow(0)  # as a refill does when the selected case left the list
        elif selected == row and self.selected_row() == row:
            self._selection_changed()  # its reasons and review changed

    @staticmethod
    def _state_of(a, row: int) -> tuple:
        return (bool(a.is_flagged[row]), str(a.scores.coordinators[row]), case_status(a, row),
                case_is_overdue(a, row))

    def reasons_arrived(self, case_rows) -> None:
        """Reasons for ``case_rows`` were just worked out (by the window's background job)."""
        if self.loaded is None or not self.rows.size:
            return
        self.model.dataChanged.emit(self.model.index(0, RULES), self.model.index(self.model.rowCount() - 1, RULES))
        selected = self.selected_row()
        if selected >= 0 and selected in set(np.asarray(case_rows).tolist()):
            self._selection_changed()

    def _fill_supervisor(self) -> None:
        self.supervisor.fill(self.loaded.assessment)

    def show_overdue(self) -> None:
        """List the overdue, unreviewed flags (every coordinator)."""
        for combo in (self.coordinator, self.status):
            combo.blockSignals(True)
            combo.setCurrentIndex(0)
            combo.blockSignals(False)
        if self.overdue_only.isChecked():
            self.apply_filters()
        else:
            self.overdue_only.setChecked(True)

    def _coordinator_clicked(self, row: int, _column: int) -> None:
        item = self.by_coordinator.item(row, 0)
        if item is not None:
            self.coordinator.setCurrentIndex(max(0, self.coordinator.findData(item.data(Qt.UserRole))))

    # -------------------------------------------------------------------- actions
    def selected_row(self) -> int:
        items = self.table.selectionModel().selectedRows() if self.table.selectionModel() else []
        return self.model.case_row(items[0].row()) if items else -1

    def select_case_row(self, r: int) -> bool:
        i = self.model.view_row_of(r)
        if i >= 0:
            self.table.selectRow(i)
        return i >= 0

    def _selection_changed(self) -> None:
        r = self.selected_row()
        if r < 0 or self.loaded is None:
            return
        a = self.loaded.assessment
        if not a.has_reasons(r):
            a.explain_cases([r])  # one case: a few milliseconds; the background job may not have got here yet
            self.model.case_changed(r)
        lines = [f"<b>{html.escape(str(self.loaded.scores.case_ids[r]))}</b> — why flagged:"]
        for reason in a.reasons[r]:
            lines.append(f"• {html.escape(reason.message)}")
        contacts = a.reasons[r][0].contacts if a.reasons[r] else []
        if contacts:
            lines.append("Each of the last contacts (the chance with it, compared with leaving it out): "
                         + " ".join(html.escape(c.sentence()) for c in contacts[:3]))
        note = str(a.review_note[r] or "")
        if note:
            lines.append(f"Latest review note ({html.escape(str(a.reviewed_by[r]))}): “{html.escape(note)}”")
        self.reasons.setText("<br>".join(lines))
        self._update_buttons(a.review_status[r] or "new")
        self._fill_audit(str(self.loaded.scores.case_ids[r]))

    def _update_buttons(self, current: str) -> None:
        from caseview.followup import ALLOWED_CHANGES

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
        from caseview.errors import CaseviewError

        try:
            entries = ws.audit_entries(case_id=case_id)[-20:]
        except CaseviewError:  # a team workspace: a coordinator's role does not read the audit trail
            self.audit_list.addItem("(the audit trail is not readable with your role in this team workspace)")
            return
        if not entries:
            self.audit_list.addItem("(no audit entries for this case yet)")
        for e in entries:
            note = e.details.get("note", "") if isinstance(e.details, dict) else ""
            self.audit_list.addItem(f"{e.at_utc[:19]}  {e.actor}  {e.action}" + (f"  — “{note}”" if note else ""))

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
        new_status = row.status  # record_review has written it into the assessment the queue shows
        self.model.case_changed(r)
        self._fill_supervisor()
        self._update_buttons(new_status)
        self._fill_audit(case_id)
        self.note.clear()
        self.window.statusBar().showMessage(f"Review recorded: {case_id} is now {new_status}.")
        self.review_saved.emit(r, new_status, row.note or "")
        self.review_recorded.emit(case_id, new_status)
        self._selection_changed()
        return True

    def verify_audit(self) -> None:
        ws = self.window.workspace()
        if ws is None:
            self.audit_status.setText("Audit trail: no workspace open.")
            return
        result = ws.audit_verify()
        if result.ok:
            self.audit_status.setText(f"Audit trail intact: {plural(result.n_entries, 'entry', 'entries')}, "
                                      f"head {result.head_hash[:12]}…")
        else:
            self.audit_status.setText(f"<b>Audit trail check FAILED</b> at entry {result.first_bad_id}: "
                                      f"{result.problem}")

    def _open_case(self, index) -> None:
        self.open_case_requested.emit(str(self.loaded.scores.case_ids[self.model.case_row(index.row())]))
