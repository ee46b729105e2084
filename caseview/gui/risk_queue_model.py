"""The risk queue's Qt table model: every listed flagged case, no cap.

Rows are an index array into the scores (from :func:`caseview.followup.queue.queue_rows`); the
view asks only for the rows on screen and ``data()`` formats one value, so 60,000 flagged cases
cost what 60 do. Nothing is computed here but text.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QAbstractTableModel, QModelIndex, Qt

from caseview.followup.queue import case_status, queue_position, queue_status
from caseview.followup.wording import due_words, percent

COLUMNS = ("Case", "Coordinator", "Follow-up now", "Reach follow-up", "Next contact due", "Review",
           "Review note", "Rules that fired")
CASE, COORDINATOR, P_NOW, P_REACH, NEXT_DUE, REVIEW, NOTE, RULES = range(len(COLUMNS))

_DISPLAY, _ACCESSIBLE_TEXT, _TOOLTIP, _ALIGNMENT = (int(r.value) for r in (
    Qt.DisplayRole, Qt.AccessibleTextRole, Qt.ToolTipRole, Qt.TextAlignmentRole))
_RIGHT = int((Qt.AlignRight | Qt.AlignVCenter).value)
_LEFT = int((Qt.AlignLeft | Qt.AlignVCenter).value)
PENDING_TIP = "Working out why this case is flagged… select it to see the reasons now."


class RiskQueueModel(QAbstractTableModel):
    """Rows = the listed flagged cases (``rows``: indices into the assessment's arrays), in order."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.assessment = None
        self.rows = np.zeros(0, dtype=np.int64)
        self.status = np.zeros(0, dtype=object)

    def set_rows(self, assessment, rows) -> None:
        self.beginResetModel()
        self.assessment = assessment
        self.rows = np.asarray(rows, dtype=np.int64)
        self.status = queue_status(assessment) if assessment is not None else np.zeros(0, dtype=object)
        self.endResetModel()

    def case_row(self, view_row: int) -> int:
        return int(self.rows[view_row])

    def view_row_of(self, case_row: int) -> int:
        hits = np.flatnonzero(self.rows == case_row)
        return int(hits[0]) if hits.size else -1

    def case_changed(self, case_row: int) -> None:
        """One case's review (or reasons) changed: repaint its row."""
        if self.assessment is not None:
            self.status[case_row] = queue_status(self.assessment)[case_row]
        i = self.view_row_of(case_row)
        if i >= 0:
            self.dataChanged.emit(self.index(i, 0), self.index(i, len(COLUMNS) - 1))

    def update_case(self, assessment, case_row: int, listed: bool) -> None:
        """Case ``case_row`` was rescored in ``assessment`` (the same cases, only that one changed):
        insert, remove or move its one row so the order stays that of
        :func:`caseview.followup.queue.queue_rows`, without sorting the queue again.

        ``listed``: whether the current filters list the case now
        (:func:`caseview.followup.queue.case_in_queue`).
        """
        self.assessment = assessment
        self.status[case_row] = case_status(assessment, case_row)
        old = self.view_row_of(case_row)
        rest = self.rows if old < 0 else np.delete(self.rows, old)
        if not listed:
            if old >= 0:
                self.beginRemoveRows(QModelIndex(), old, old)
                self.rows = rest
                self.endRemoveRows()
            return
        new = queue_position(assessment, rest, case_row)
        if old < 0:
            self.beginInsertRows(QModelIndex(), new, new)
            self.rows = np.insert(rest, new, case_row)
            self.endInsertRows()
        elif new != old:  # Qt's destination counts the rows before the move
            self.beginMoveRows(QModelIndex(), old, old, QModelIndex(), new if new < old else new + 1)
            self.rows = np.insert(rest, new, case_row)
            self.endMoveRows()
        self.dataChanged.emit(self.index(new, 0), self.index(new, len(COLUMNS) - 1))

    # ------------------------------------------------------------------ Qt model API
    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else int(self.rows.size)

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if orientation == Qt.Horizontal and role == Qt.DisplayRole:
            return COLUMNS[section]
        if orientation == Qt.Horizontal and role == Qt.ToolTipRole and section == NEXT_DUE:
            return "Overdue cases first within each review group; hover a date for the day itself"
        return None

    def data(self, index, role=Qt.DisplayRole):
        role = role if type(role) is int else int(role)
        if self.assessment is None or not index.isValid():
            return None
        column = index.column()
        if role == _ALIGNMENT:
            return _RIGHT if column in (P_NOW, P_REACH) else _LEFT
        r = int(self.rows[index.row()])
        if role == _DISPLAY or role == _ACCESSIBLE_TEXT:
            return self.text(r, column)
        if role == _TOOLTIP:
            if column == RULES:
                a = self.assessment
                return str(a.reason_text[r]) if a.has_reasons(r) else PENDING_TIP
            if column == NOTE:
                return self.text(r, NOTE) or None
        return None

    def text(self, r: int, column: int) -> str:
        a = self.assessment
        s = a.scores
        if column == CASE:
            return str(s.case_ids[r])
        if column == COORDINATOR:
            return str(s.coordinators[r] or "-")
        if column == P_NOW:
            return percent(s.p_follow_up_now[r])
        if column == P_REACH:
            return percent(s.p_reach_follow_up[r])
        if column == NEXT_DUE:
            return due_words(a.next_contact_due_day[r], s.as_of_day)
        if column == REVIEW:
            return str(self.status[r] or "new")
        if column == NOTE:
            return str(a.review_note[r] or "")
        if column == RULES:
            return str(a.flags[r]).replace("_", " ").replace(";", ", ")
        return ""
