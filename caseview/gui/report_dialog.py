"""Team-meeting report: options, then ``caseview.reports.build_report`` in a worker."""

from __future__ import annotations

import datetime as dt

from PySide6.QtCore import QDate
from PySide6.QtWidgets import (QCheckBox, QComboBox, QDateEdit, QDialog, QDialogButtonBox, QFileDialog, QFormLayout,
                               QHBoxLayout, QLabel, QLineEdit, QProgressBar, QPushButton, QVBoxLayout)

from caseview import ADVISORY_NOTICE

from .workers import JobRunner


class ReportDialog(QDialog):
    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window
        self.setWindowTitle("Team-meeting report")
        self.jobs = JobRunner(self, max_threads=1)
        layout = QVBoxLayout(self)
        note = QLabel(ADVISORY_NOTICE)
        note.setWordWrap(True)
        layout.addWidget(note)
        form = QFormLayout()
        self.format = QComboBox()
        self.format.addItems(["PDF (.pdf)", "Workbook (.xlsx)", "Stage summary (.csv)"])
        self.coordinator = QComboBox()
        self.coordinator.addItem("All coordinators", "")
        for c in window.caseload.model.coordinator_names():
            self.coordinator.addItem(c, c)
        self.flagged = QCheckBox("Flagged cases only")
        self.since_on = QCheckBox("Changes since")
        self.since = QDateEdit(QDate.currentDate().addDays(-28))
        self.since.setCalendarPopup(True)
        self.since.setDisplayFormat("yyyy-MM-dd")
        since_row = QHBoxLayout()
        since_row.addWidget(self.since_on)
        since_row.addWidget(self.since)
        self.dates = QComboBox()
        self.dates.addItem("Calendar dates (inside the team)", "calendar")
        self.dates.addItem("Days since first contact (safer to share)", "relative")
        self.dates.addItem("Shifted dates (not de-identification)", "shifted")
        self.out = QLineEdit()
        browse = QPushButton("Save as…")
        browse.clicked.connect(self._browse)
        out_row = QHBoxLayout()
        out_row.addWidget(self.out, 1)
        out_row.addWidget(browse)
        form.addRow("Format", self.format)
        form.addRow("Coordinator", self.coordinator)
        form.addRow("", self.flagged)
        form.addRow("", since_row)
        form.addRow("Dates", self.dates)
        form.addRow("File", out_row)
        layout.addLayout(form)
        self.progress = QProgressBar()
        self.message = QLabel("")
        self.message.setWordWrap(True)
        layout.addWidget(self.progress)
        layout.addWidget(self.message)
        self.buttons = QDialogButtonBox(QDialogButtonBox.Close)
        self.make = self.buttons.addButton("Make report", QDialogButtonBox.ActionRole)
        self.make.clicked.connect(self.start)
        self.buttons.rejected.connect(self.reject)
        layout.addWidget(self.buttons)

    def _browse(self) -> None:
        ext = [".pdf", ".xlsx", ".csv"][self.format.currentIndex()]
        path, _ = QFileDialog.getSaveFileName(self, "Save report", f"report{ext}", f"*{ext}")
        if path:
            self.out.setText(path if path.endswith(ext) else path + ext)

    def start(self) -> None:
        from caseview.reports import build_report
        from caseview.storage import Workspace

        out = self.out.text().strip()
        if not out:
            self.message.setText("Choose where to save the report.")
            return
        w = self.window
        ws_path, as_of, horizon, actor = w.source.path, w.as_of, w.horizon_days, w.actor
        reopen = getattr(w.source, "open_workspace", None) or (lambda: Workspace.open(ws_path))
        coordinator = self.coordinator.currentData() or None
        flagged, dates = self.flagged.isChecked(), self.dates.currentData()
        d = self.since.date()
        since = dt.date(d.year(), d.month(), d.day()) if self.since_on.isChecked() else None

        def job(callback):
            with reopen() as ws:  # a database workspace keeps the password the window was given
                return build_report(ws, as_of, out, horizon_days=horizon, coordinator=coordinator,
                                    flagged_only=flagged, since=since, dates=dates, actor=actor, callback=callback)

        self.make.setEnabled(False)
        self.message.setText("Making the report…")
        self.jobs.start("report", job, on_finished=self._done, on_failed=self._failed,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)),
                        on_cancelled=lambda: self.message.setText("Report cancelled."))

    def _done(self, result) -> None:
        self.make.setEnabled(True)
        self.progress.setValue(100)
        self.message.setText(f"Saved {result.path} ({result.count} {'pages' if result.format == 'pdf' else 'rows'}); "
                             "recorded in the audit trail.")

    def _failed(self, message: str) -> None:
        self.make.setEnabled(True)
        self.message.setText(f"Report failed: {message}")

    def reject(self) -> None:
        self.jobs.cancel("report")
        super().reject()

    def done(self, code) -> None:
        self.jobs.shutdown()
        super().done(code)
