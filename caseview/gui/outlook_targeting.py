"""The Outlook tab's targeting tool: choose a change and a number of places, see the ranked list and the comparison.

Runs :func:`caseview.operations.outlook.run_targeting` (the function ``caseview target`` calls) in
the window's worker pool, shows the ranking in a table and the three-way comparison (by benefit,
by risk, at random) as text, and exports both with
:func:`caseview.operations.outlook.export_targeting`.
"""

from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QDoubleSpinBox, QFileDialog, QGroupBox, QHBoxLayout,
                               QHeaderView, QLabel, QProgressBar, QPushButton, QSpinBox, QTableWidget,
                               QTableWidgetItem, QVBoxLayout)

#: The table shows at most this many ranked cases (the export has them all).
MAX_SHOWN = 500


class TargetingArea(QGroupBox):
    """Where to invest a limited number of places; ``ranked(result)`` when a ranking is shown."""

    ranked = Signal(object)

    def __init__(self, window, parent=None):
        super().__init__("Where to invest places", parent)
        self.window = window
        self.result = None
        self.change = QComboBox()
        self.change.setAccessibleName("Change a place brings")
        self.value = QDoubleSpinBox(minimum=-1000.0, maximum=1000.0, value=1.0, decimals=2)
        self.value.setAccessibleName("New value")
        self.places = QSpinBox(minimum=1, maximum=10_000_000, value=40, suffix=" places")
        self.places.setAccessibleName("Number of places")
        self.horizon = QSpinBox(minimum=1, maximum=3650, value=180, suffix=" days")
        self.horizon.setAccessibleName("Horizon")
        self.among = QComboBox()
        self.among.addItem("flagged cases", "flagged")
        self.among.addItem("all open cases", "all")
        self.rank_button = QPushButton("Rank")
        self.rank_button.clicked.connect(self.rank)
        self.progress = QProgressBar(maximum=100, textVisible=False)
        self.progress.setMaximumWidth(120)
        self.progress.hide()
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.hide()
        self.cancel_button.clicked.connect(lambda: self.window.jobs.cancel("targeting"))
        self.export_button = QPushButton("Export list…")
        self.export_button.setEnabled(False)
        self.export_button.clicked.connect(self.export_dialog)
        first = QHBoxLayout()
        for widget in (QLabel("Set"), self.change, QLabel("="), self.value, self.places):
            first.addWidget(widget)
        first.addStretch(1)
        second = QHBoxLayout()
        for widget in (QLabel("within"), self.horizon, QLabel("among"), self.among):
            second.addWidget(widget)
        second.addStretch(1)
        third = QHBoxLayout()
        for widget in (self.rank_button, self.progress, self.cancel_button, self.export_button):
            third.addWidget(widget)
        third.addStretch(1)
        self.comparison = QLabel("Choose the change a place brings and the number of places, then Rank.")
        self.comparison.setObjectName("targetingComparison")
        self.comparison.setWordWrap(True)
        self.table = QTableWidget(0, 6)
        self.table.setHorizontalHeaderLabels(["rank", "case", "coordinator", "P(reach) without", "P(reach) with",
                                              "reduction"])
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.verticalHeader().hide()
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.table.verticalHeader().setDefaultSectionSize(self.table.fontMetrics().height() + 6)
        self.table.setAccessibleName("Cases ranked by the reduction in the chance of reaching a follow-up stage")
        self.note = QLabel("")
        self.note.setWordWrap(True)
        self.note.setObjectName("targetingNote")
        layout = QVBoxLayout(self)
        layout.addLayout(first)
        layout.addLayout(second)
        layout.addLayout(third)
        layout.addWidget(self.comparison)
        layout.addWidget(self.table, 1)
        layout.addWidget(self.note)

    def set_covariates(self, names) -> None:
        current = self.change.currentText()
        self.change.clear()
        self.change.addItems(list(names))
        if current in names:
            self.change.setCurrentText(current)
        elif "balance_programme" in names:
            self.change.setCurrentText("balance_programme")
        self.rank_button.setEnabled(bool(names))

    def source_changed(self) -> None:
        self.window.jobs.cancel("targeting")
        self.result = None
        self.table.setRowCount(0)
        self.export_button.setEnabled(False)
        self.comparison.setText("Choose the change a place brings and the number of places, then Rank.")
        self.note.setText("")

    def rank(self) -> None:
        """Rank the cases of the caseload the window shows (its flags; no second scoring)."""
        loaded = getattr(self.window, "loaded", None)
        if loaded is None or getattr(loaded, "assessment", None) is None or not self.change.currentText():
            return
        assessment = loaded.assessment
        changes = {self.change.currentText(): self.value.value()}
        places, horizon, among = self.places.value(), self.horizon.value(), self.among.currentData()
        from caseview.operations.outlook import targeting_from_assessment

        def work(callback):
            callback(0.1)
            return targeting_from_assessment(assessment, changes, places, horizon, among)

        self.progress.setValue(0)
        self.progress.show()
        self.cancel_button.show()
        self.rank_button.setEnabled(False)
        self.comparison.setText("Ranking…")
        self.window.jobs.start("targeting", work, on_finished=self._finished, on_failed=self._failed,
                               on_progress=lambda f: self.progress.setValue(int(100 * f)),
                               on_cancelled=lambda: self._ended("Ranking cancelled."))

    def _ended(self, message: str | None = None) -> None:
        self.progress.hide()
        self.cancel_button.hide()
        self.rank_button.setEnabled(True)
        if message:
            self.comparison.setText(message)

    def _failed(self, message: str) -> None:
        self._ended(f"Could not rank: {message}")

    def _finished(self, result) -> None:
        from caseview.operations.outlook import targeting_summary_lines

        self._ended()
        self.result = result
        lines = targeting_summary_lines(result)
        self.comparison.setText("<br>".join(lines[:2] + ["<b>" + lines[2] + "</b>"] + lines[3:-2]))
        self.note.setText(" ".join(lines[-2:]))
        shown = min(result.n_ranked, MAX_SHOWN)
        self.table.setRowCount(shown)
        for i in range(shown):
            cells = (str(i + 1), result.case_ids[i], result.coordinators[i], f"{result.p_reach_without[i]:.2f}",
                     f"{result.p_reach_with[i]:.2f}", f"{result.reduction[i]:.3f}")
            for j, text in enumerate(cells):
                self.table.setItem(i, j, QTableWidgetItem(text))
        if result.n_ranked > shown:
            self.note.setText(self.note.text() + f" The table shows the first {shown:,}; the export has all "
                                                 f"{result.n_ranked:,}.")
        self.export_button.setEnabled(True)
        self.ranked.emit(result)

    def export_dialog(self) -> None:
        if self.result is None:
            return
        path, _ = QFileDialog.getSaveFileName(self, "Export ranking", "target.csv", "CSV (*.csv)")
        if path:
            self.export(path)

    def export(self, path) -> str | None:
        from caseview.errors import CaseviewError
        from caseview.operations.outlook import export_targeting

        try:
            summary = export_targeting(self.result, path)
        except CaseviewError as exc:
            self.window.show_error(str(exc))
            return None
        self.window.statusBar().showMessage(f"Wrote {path} and {summary}")
        return summary
