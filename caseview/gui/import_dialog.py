"""Import contacts: preview the file, map its columns, check everything, then import (all or nothing).

Checking runs the workspace importer (``caseview.timeline_io.import_timelines``) with
``check_only=True``: every row is validated and compared with the stored contacts inside a write
transaction that is then rolled back, so the user sees what an import would add, skip or clash with,
and nothing is stored until they press Import and the whole file passed.
"""

from __future__ import annotations

import csv
from pathlib import Path

from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QFileDialog, QFormLayout, QHBoxLayout, QLabel,
                               QLineEdit, QListWidget, QProgressBar, QPushButton, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from .workers import JobRunner

PREVIEW_ROWS = 8
LEAVE_OUT = "(leave out)"

def read_preview(path, rows: int = PREVIEW_ROWS) -> tuple:
    """Header and first rows of a CSV or XLSX file (text only, for showing)."""
    path = Path(path)
    if path.suffix.lower() == ".xlsx":
        from openpyxl import load_workbook

        book = load_workbook(path, read_only=True, data_only=True)
        sheet = book.worksheets[0]
        lines = [["" if v is None else str(v) for v in row] for _, row in
                 zip(range(rows + 1), sheet.iter_rows(values_only=True))]
        book.close()
    else:
        with open(path, newline="", encoding="utf-8-sig", errors="replace") as handle:
            lines = [row for _, row in zip(range(rows + 1), csv.reader(handle))]
    return (lines[0] if lines else []), lines[1:]


def split_problems(message: str) -> list:
    """One list entry per problem line of an importer message (first line is the summary)."""
    return [line for line in str(message).splitlines() if line.strip()]


class ImportDialog(QDialog):
    """Needs a workspace source (``source.path``) and its main-thread workspace."""

    def __init__(self, source, actor: str, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Import contacts")
        self.resize(980, 640)
        self.source, self.actor = source, actor
        self.path = None
        self.checked_ok = False
        self.jobs = JobRunner(self, max_threads=1)
        self.file_edit = QLineEdit()
        self.file_edit.setReadOnly(True)
        self.file_edit.setAccessibleName("File to import")
        browse = QPushButton("Choose file…")
        browse.clicked.connect(self._browse)
        top = QHBoxLayout()
        top.addWidget(QLabel("File"))
        top.addWidget(self.file_edit, 1)
        top.addWidget(browse)
        self.preview = QTableWidget(0, 0)
        self.preview.setAccessibleName("First rows of the file")
        self.mapping_box = QWidget()
        self.mapping_form = QFormLayout(self.mapping_box)
        self.mapping = {}
        self.problems = QListWidget()
        self.problems.setAccessibleName("Problems found in the file")
        self.summary = QLabel("Choose a CSV or XLSX file with one row per contact.")
        self.summary.setWordWrap(True)
        self.progress = QProgressBar()
        self.check_button = QPushButton("Check file")
        self.check_button.clicked.connect(self.check)
        self.buttons = QDialogButtonBox(QDialogButtonBox.Cancel)
        self.import_button = self.buttons.addButton("Import", QDialogButtonBox.AcceptRole)
        self.import_button.setEnabled(False)
        self.buttons.accepted.connect(self.do_import)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addLayout(top)
        layout.addWidget(QLabel(f"Preview (first {PREVIEW_ROWS} rows)"))
        layout.addWidget(self.preview, 2)
        layout.addWidget(QLabel("Column mapping (file column → what it holds)"))
        layout.addWidget(self.mapping_box)
        row = QHBoxLayout()
        row.addWidget(self.check_button)
        row.addWidget(self.progress, 1)
        layout.addLayout(row)
        layout.addWidget(self.summary)
        layout.addWidget(self.problems, 2)
        layout.addWidget(self.buttons)

    def _targets(self) -> list:
        model = self.source.current_model()
        return (["case_id", "date", "coordinator", "stage_known"] + [c.name for c in model.channels]
                + list(model.covariates))

    def _browse(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Timeline file", "", "Timelines (*.csv *.xlsx)")
        if path:
            self.load_file(path)

    def load_file(self, path) -> None:
        self.path = Path(path)
        self.file_edit.setText(str(path))
        self.checked_ok = False
        self.import_button.setEnabled(False)
        self.problems.clear()
        ws = getattr(self.source, "workspace", lambda: None)()
        if hasattr(ws, "is_own_file") and ws.is_own_file(path):  # reading it with open() would drop our SQLite locks
            self.summary.setText(f"{path} is the workspace file itself, not a timeline file.")
            return
        try:
            header, rows = read_preview(path)
        except (OSError, ValueError) as exc:
            self.summary.setText(f"Cannot read {path}: {exc}")
            return
        self.preview.setColumnCount(len(header))
        self.preview.setHorizontalHeaderLabels(header)
        self.preview.setRowCount(len(rows))
        for i, r in enumerate(rows):
            for j, v in enumerate(r[:len(header)]):
                self.preview.setItem(i, j, QTableWidgetItem(v))
        while self.mapping_form.rowCount():
            self.mapping_form.removeRow(0)
        self.mapping = {}
        targets = self._targets()
        for name in header:
            combo = QComboBox()
            combo.addItems(targets + [LEAVE_OUT])
            combo.setCurrentText(name if name in targets else LEAVE_OUT)
            combo.setAccessibleName(f"What column {name} holds")
            combo.currentIndexChanged.connect(self._mapping_changed)
            self.mapping_form.addRow(name or "(no name)", combo)
            self.mapping[name] = combo
        self.summary.setText("Check the mapping, then press Check file. Nothing is stored until you press Import.")

    def _mapping_changed(self) -> None:
        self.checked_ok = False
        self.import_button.setEnabled(False)

    def mapping_arguments(self) -> tuple:
        mapping = {s: c.currentText() for s, c in self.mapping.items() if c.currentText() not in (s, LEAVE_OUT)}
        drop = tuple(s for s, c in self.mapping.items() if c.currentText() == LEAVE_OUT)
        return mapping, drop

    # ---------------------------------------------------------------- checking / importing
    def _run(self, validate_only: bool):
        from caseview.storage import Workspace
        from caseview.timeline_io import import_timelines

        path, actor, ws_path = self.path, self.actor, self.source.path
        mapping, drop = self.mapping_arguments()

        def job(callback):
            with Workspace.open(ws_path) as ws:
                return import_timelines(ws, path, actor, mapping=mapping, drop=drop, progress=callback,
                                        check_only=validate_only)
        return job

    def check(self) -> None:
        if self.path is None:
            return
        self.problems.clear()
        self.summary.setText("Checking every row…")
        self.check_button.setEnabled(False)
        self.jobs.start("import", self._run(True), on_finished=self._checked, on_failed=self._failed,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)))

    def _checked(self, result) -> None:
        self.check_button.setEnabled(True)
        self.progress.setValue(100)
        self.checked_ok = True
        self.import_button.setEnabled(True)
        self.problems.clear()
        for w in getattr(result, "warnings", []) or []:
            self.problems.addItem(f"warning: {w}")
        self.summary.setText(f"The whole file is valid: importing it would add {result.contacts_added:,} contacts "
                             f"({result.cases_added:,} new cases) and skip {result.duplicates_skipped:,} exact "
                             "duplicates. Nothing is stored yet: press Import to store it (one transaction, "
                             "audited).")

    def _failed(self, message: str) -> None:
        self.check_button.setEnabled(True)
        self.checked_ok = False
        self.import_button.setEnabled(False)
        lines = split_problems(message)
        self.summary.setText(lines[0] if lines else message)
        self.problems.clear()
        self.problems.addItems(lines[1:] or lines)

    def do_import(self) -> None:
        if not self.checked_ok:
            return
        self.import_button.setEnabled(False)
        self.summary.setText("Importing…")
        self.jobs.start("import", self._run(False), on_finished=self._imported, on_failed=self._failed,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)))

    def _imported(self, result) -> None:
        self.result = result
        self.problems.clear()
        for w in getattr(result, "warnings", []) or []:
            self.problems.addItem(f"warning: {w}")
        self.summary.setText(f"Imported {result.contacts_added:,} contacts ({result.cases_added:,} new cases, "
                             f"{result.duplicates_skipped:,} duplicates skipped).")
        self.accept()

    def done(self, code) -> None:
        self.jobs.shutdown()
        super().done(code)
