"""The caseload table with its filter bar and probability bars."""

from __future__ import annotations

from PySide6.QtCore import QRect, Qt, Signal
from PySide6.QtGui import QColor, QKeySequence, QShortcut
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QComboBox, QHBoxLayout, QHeaderView, QLabel,
                               QLineEdit, QStyledItemDelegate, QTableView, QVBoxLayout, QWidget)

from caseview.followup.wording import plural

from . import theme
from .caseload_model import P_NOW, P_REACH, PROBABILITY_ROLE, REVIEW_STATUSES, STAGE, CaseloadTableModel


ANY = "*"  # item data meaning "no filter" for the review combo (a text, never None)


class ProbabilityDelegate(QStyledItemDelegate):
    """Paints a thin bar under the percentage; its colour repeats the value (never the only cue)."""

    def paint(self, painter, option, index):
        super().paint(painter, option, index)
        # Ask the Python model directly: on PySide6 6.12 with Python 3.11, QModelIndex.data() and
        # QComboBox.currentData() returning None drop a reference to None (crash after many calls).
        value = index.model().probability_at(index.row(), index.column())
        if value is None:
            return
        rect = option.rect.adjusted(4, option.rect.height() - 6, -4, -2)
        painter.save()
        painter.fillRect(rect, QColor(128, 128, 128, 50))
        filled = QRect(rect.left(), rect.top(), max(1, int(rect.width() * float(value))), rect.height())
        colour = theme.colour("accent") if index.column() == STAGE else theme.risk_colour(float(value))
        painter.fillRect(filled, QColor(colour))
        painter.restore()


class CaseloadPanel(QWidget):
    """Filter bar + table. Emits ``case_selected(case_row)`` (row into the scores arrays) and
    ``selection_cleared()`` when no case is selected any more (for example filtered out)."""

    case_selected = Signal(int)
    selection_cleared = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.model = CaseloadTableModel(self)
        self.search = QLineEdit(placeholderText="Search case ID  (Ctrl+F)")
        self.search.setAccessibleName("Search by case ID")
        self.search.setClearButtonEnabled(True)
        self.coordinator = QComboBox()
        self.coordinator.setAccessibleName("Filter by coordinator")
        self.stage = QComboBox()
        self.stage.setAccessibleName("Filter by most likely stage")
        self.flagged = QCheckBox("Flagged only")
        self.flagged.setAccessibleName("Show flagged cases only")
        self.review = QComboBox()
        self.review.setAccessibleName("Filter by review status")
        self.show_closed = QCheckBox("Show closed")
        self.show_closed.setAccessibleName("Also show closed cases")
        self.show_closed.setToolTip("Closed cases leave the table, the risk queue, flags and reports; show them too")
        self.review.addItem("Any review status", ANY)
        for status in REVIEW_STATUSES:
            self.review.addItem(status or "not reviewed", status)
        self.count = QLabel("No caseload open")
        self.count.setAccessibleName("Number of cases shown")
        bar = QHBoxLayout()
        for w in (self.search, self.coordinator, self.stage, self.flagged, self.review, self.show_closed):
            bar.addWidget(w)
        bar.addStretch(1)
        bar.addWidget(self.count)
        self.search.setMinimumWidth(200)
        for combo in (self.coordinator, self.stage, self.review):
            combo.setSizeAdjustPolicy(QComboBox.AdjustToContents)

        self.table = QTableView()
        self.table.setObjectName("caseloadTable")
        self.table.setAccessibleName("Caseload table")
        self.table.setModel(self.model)
        self.table.setSortingEnabled(False)  # we call model.sort ourselves (priority is the default)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SingleSelection)
        self.table.setAlternatingRowColors(True)
        self.table.setWordWrap(False)
        vertical = self.table.verticalHeader()
        vertical.hide()
        vertical.setSectionResizeMode(QHeaderView.Fixed)  # uniform rows: O(1) layout at 100,000 rows
        vertical.setDefaultSectionSize(self.fontMetrics().height() + 10)
        header = self.table.horizontalHeader()
        header.setSectionsClickable(True)
        header.setSortIndicatorShown(True)
        header.setSortIndicator(-1, Qt.DescendingOrder)
        # the header flips its own indicator on a click (same column: reverse; new column: ascending);
        # sort on the indicator's change, never flip a second time ourselves
        header.sortIndicatorChanged.connect(self._sort_indicator_changed)
        header.setStretchLastSection(True)
        for column, width in enumerate((95, 95, 100, 80, 170, 110, 165, 185, 190, 110)):
            self.table.setColumnWidth(column, width)
        delegate = ProbabilityDelegate(self.table)
        for column in (STAGE, P_NOW, P_REACH):
            self.table.setItemDelegateForColumn(column, delegate)
        self.table.selectionModel().currentRowChanged.connect(self._current_changed)

        self.not_scored = QLabel()   # cases that cannot be scored: never silently missing from the table
        self.not_scored.setObjectName("notScoredNotice")
        self.not_scored.setAccessibleName("Cases that cannot be scored")
        self.not_scored.setWordWrap(True)
        self.not_scored.setTextFormat(Qt.PlainText)
        self.not_scored.setStyleSheet(f"QLabel#notScoredNotice {{ border-left: 5px solid {theme.colour('risk_high')}; "
                                      "padding: 4px 8px; font-weight: bold; }")
        self.not_scored.hide()

        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addLayout(bar)
        layout.addWidget(self.not_scored)
        layout.addWidget(self.table, 1)

        self.search.textChanged.connect(lambda text: self._filter(search=text))
        self.search.returnPressed.connect(lambda: self.table.setFocus(Qt.OtherFocusReason))
        self.coordinator.currentIndexChanged.connect(lambda _: self._filter(coordinator=self.coordinator.currentData()))
        self.stage.currentIndexChanged.connect(lambda _: self._filter(stage=int(self.stage.currentData())))
        self.flagged.toggled.connect(lambda on: self._filter(flagged_only=bool(on)))
        self.review.currentIndexChanged.connect(lambda _: self._filter(
            review=None if self.review.currentData() == ANY else self.review.currentData()))
        QShortcut(QKeySequence.Find, self, activated=self.focus_search)
        QShortcut(QKeySequence("Ctrl+Shift+P"), self, activated=self.sort_by_priority)
        self._last_case_row = -1
        self._quiet = False  # True while the table is rebuilt: one signal at the end, not one per step

    # --------------------------------------------------------------------- loading
    def set_caseload(self, loaded) -> None:
        """Show a new scoring run; the selected case stays selected and is announced again
        (``case_selected``) so the case pane shows its new estimate, never the old one."""
        keep = self.current_case_id()
        self._quiet = True
        try:
            self.model.set_caseload(loaded)
            self._fill_combo(self.coordinator, "All coordinators", "",
                             [(c, c) for c in self.model.coordinator_names()])
            self._fill_combo(self.stage, "Any likely stage", -1,
                             [(s, i) for i, s in enumerate(loaded.scores.model.stages)])
            self._show_not_scored(loaded.scores.unscorable)
            self._update_count()
            if not (keep and self.select_case(keep)) and self.model.rowCount():
                self.table.selectRow(0)
        finally:
            self._quiet = False
        self._announce(force=True)

    def _announce(self, force: bool = False) -> None:
        """Tell the case pane what is selected now (``force``: even if it is the same row)."""
        index = self.table.currentIndex()
        if index.isValid() and self.table.selectionModel().isRowSelected(index.row(), index.parent()):
            row = self.model.case_row(index.row())
            if force or row != self._last_case_row:
                self._last_case_row = row
                self.case_selected.emit(row)
        elif force or self._last_case_row != -1:
            self._last_case_row = -1
            self.selection_cleared.emit()

    def _show_not_scored(self, lost) -> None:
        """The "cannot be scored" state: which cases are missing from the table, and why."""
        if lost is None or not lost.n_cases:
            self.not_scored.hide()
            return
        self.not_scored.setText(f"{lost.summary(limit=3)}. Not in the table below: correct or void their records "
                                "(every reason in the tooltip).")
        self.not_scored.setToolTip("\n".join(f"{c}: {r}" for c, r in zip(lost.case_ids[:50], lost.reasons[:50])))
        self.not_scored.show()

    def update_case(self, loaded, row: int) -> None:
        """One case of the shown caseload was rescored (see ``CaseloadTableModel.update_case``)."""
        keep = self.current_case_id()
        if not self.model.update_case(loaded, row):
            self.set_caseload(loaded)
            return
        self._update_count()
        if keep:
            self.select_case(keep)

    def _fill_combo(self, combo, all_text, all_value, items):
        current = combo.currentData() if combo.count() else all_value
        combo.blockSignals(True)
        combo.clear()
        combo.addItem(all_text, all_value)  # never None as item data (see ProbabilityDelegate.paint)
        for text, data in items:
            combo.addItem(str(text), data)
        position = combo.findData(current)
        combo.setCurrentIndex(max(0, position))
        combo.blockSignals(False)

    # --------------------------------------------------------------------- actions
    def focus_search(self) -> None:
        self.search.setFocus(Qt.ShortcutFocusReason)
        self.search.selectAll()

    def sort_by_priority(self) -> None:
        header = self.table.horizontalHeader()
        if header.sortIndicatorSection() == -1:
            self.model.sort_by_priority()
        else:
            header.setSortIndicator(-1, Qt.DescendingOrder)  # sorts through _sort_indicator_changed

    def _sort_indicator_changed(self, column: int, order) -> None:
        if column < 0:
            self.model.sort_by_priority()
        else:
            self.model.sort(column, order)
        index = self.table.currentIndex()
        if index.isValid():
            self.table.scrollTo(index)

    def _header_clicked(self, column: int) -> None:
        """What a click on a column header does (same column: reverse; another: ascending)."""
        header = self.table.horizontalHeader()
        if header.sortIndicatorSection() == column:
            order = Qt.AscendingOrder if header.sortIndicatorOrder() == Qt.DescendingOrder else Qt.DescendingOrder
        else:
            order = Qt.AscendingOrder
        header.setSortIndicator(column, order)

    def _filter(self, **change) -> None:
        """Apply a filter. The selected case stays selected while it is shown; a search selects its
        first match; a filter that hides the selected case clears the selection (and the pane)."""
        keep = self.current_case_id()
        self._quiet = True
        try:
            self.model.set_filters(**change)
            self._update_count()
            kept = bool(keep) and self.select_case(keep)
            if not kept:
                self.table.clearSelection()
                self.table.setCurrentIndex(self.model.index(-1, -1))
                if "search" in change and change["search"].strip() and self.model.rowCount():
                    self.table.selectRow(0)
                    self.table.scrollTo(self.model.index(0, 0))
        finally:
            self._quiet = False
        self._announce()

    def clear_filters(self) -> None:
        """Show every case again (search, coordinator, stage, flagged-only and review filters off)."""
        for w in (self.search, self.coordinator, self.stage, self.flagged, self.review):
            w.blockSignals(True)
        self.search.clear()
        for combo in (self.coordinator, self.stage, self.review):
            combo.setCurrentIndex(0)
        self.flagged.setChecked(False)
        for w in (self.search, self.coordinator, self.stage, self.flagged, self.review):
            w.blockSignals(False)
        self._filter(coordinator="", stage=-1, flagged_only=False, review=None, search="")

    def _update_count(self) -> None:
        shown, total = self.model.rowCount(), self.model._n
        flagged = int(self.model.is_flagged.sum()) if self.model.scores is not None else 0
        lost = self.model.scores.unscorable if self.model.scores is not None else None   # None: nothing loaded
        missing = f" · {lost.n_cases:,} cannot be scored" if lost is not None and lost.n_cases else ""
        self.count.setText(f"{shown:,} of {plural(total, 'case')} shown · {flagged:,} flagged{missing}")

    def _current_changed(self, current, _previous) -> None:
        if self._quiet:
            return
        if current.isValid():
            row = self.model.case_row(current.row())
            if row != self._last_case_row:
                self._last_case_row = row
                self.case_selected.emit(row)

    def current_case_id(self) -> str | None:
        index = self.table.currentIndex()
        if not index.isValid() or self.model.scores is None:
            return None
        return str(self.model.case_ids[self.model.case_row(index.row())])

    def select_case(self, case_id: str) -> bool:
        """Select and show ``case_id``; False if it is not in the table (or filtered out)."""
        view_row = self.model.view_row_of_case(case_id)
        if view_row < 0:
            return False
        self.table.selectRow(view_row)
        if not self._quiet:
            self._announce()
        self.table.scrollTo(self.model.index(view_row, 0), QAbstractItemView.PositionAtCenter)
        return True
