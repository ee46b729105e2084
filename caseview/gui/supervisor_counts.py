"""The risk queue's supervisor counts: flagged cases by coordinator and review status, and the overdue link.

Filled from :func:`caseview.followup.queue.counts_by_coordinator` (nothing is counted here), and
adjusted by one case when one case was rescored, so a recorded contact never recounts 100,000 cases.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QLabel, QTableWidget, QTableWidgetItem

from caseview.followup.queue import QUEUE_STATUSES, counts_by_coordinator, overdue_mask
from caseview.followup.wording import plural


class SupervisorCounts:
    """``table`` (coordinator x review status + overdue) and ``overdue`` (a label with a link)."""

    def __init__(self):
        self.table = QTableWidget(0, 2 + len(QUEUE_STATUSES))
        self.table.setAccessibleName("Flags by coordinator and review status; select a row to list them")
        self.table.setHorizontalHeaderLabels(["Coordinator", *QUEUE_STATUSES, "overdue"])
        self.table.verticalHeader().hide()
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.table.horizontalHeader().setSectionResizeMode(0, QHeaderView.Stretch)
        self.overdue = QLabel("")
        self.overdue.setWordWrap(True)
        self.overdue.setTextFormat(Qt.RichText)
        self.overdue.setAccessibleName("Overdue flags (click to list them)")
        self.counts, self.rows, self.n_overdue, self.as_of = {}, {}, 0, ""

    def fill(self, assessment) -> None:
        """Count every flagged case of ``assessment``."""
        counts = counts_by_coordinator(assessment)
        self.counts = {c.coordinator: [c.by_status[st] for st in QUEUE_STATUSES] + [c.overdue] for c in counts}
        self.rows = {c.coordinator: i for i, c in enumerate(counts)}
        self.table.setRowCount(len(counts))
        for i, c in enumerate(counts):
            item = QTableWidgetItem(c.coordinator or "-")
            item.setData(Qt.UserRole, c.coordinator)
            self.table.setItem(i, 0, item)
            for j, value in enumerate(self.counts[c.coordinator]):
                cell = QTableWidgetItem(f"{value:,}")
                cell.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                self.table.setItem(i, j + 1, cell)
        self.n_overdue = int(np.count_nonzero(overdue_mask(assessment)))
        self.as_of = assessment.scores.as_of.isoformat()
        self._show_overdue()

    def adjust(self, before, after) -> bool:
        """Move one case's count between cells (``before``/``after``: ``(flagged, coordinator, status,
        overdue)``); False, changing nothing, if a coordinator row would appear or disappear."""
        counts = {name: list(values) for name, values in self.counts.items()}
        for (flagged, coordinator, status, overdue), sign in ((before, -1), (after, 1)):
            if not flagged:
                continue
            if coordinator not in counts or status not in QUEUE_STATUSES:
                return False
            counts[coordinator][QUEUE_STATUSES.index(status)] += sign
            counts[coordinator][-1] += sign * int(overdue)
        if any(sum(values[:-1]) <= 0 for values in counts.values()):
            return False
        for name, values in counts.items():
            if values != self.counts[name]:
                for j, value in enumerate(values):
                    self.table.item(self.rows[name], j + 1).setText(f"{value:,}")
        self.counts = counts
        self.n_overdue += int(after[0] and after[3]) - int(before[0] and before[3])
        self._show_overdue()
        return True

    def _show_overdue(self) -> None:
        self.overdue.setText(f"<a href='overdue'><b>{plural(self.n_overdue, 'overdue flag')}</b></a>: the next "
                             f"contact was due before {self.as_of} (or is due that day) and nobody has reviewed "
                             "the flag yet. Click to list them.")
