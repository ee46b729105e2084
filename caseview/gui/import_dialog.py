"""Import contacts: preview the file, map its columns, check everything, then import (all or nothing).

Checking runs the workspace importer (``caseview.timeline_io.import_timelines``) with
``check_only=True``: every row is validated and compared with the stored contacts inside a write
transaction that is then rolled back, so the user sees what an import would add, skip or clash with,
and nothing is stored until they press Import and the whole file passed.

The dialog offers the command line's choices (``--date-format``, ``--header-row``) and passes them to
the same function; a problem whose message suggests a date format gets a button that applies it, and
the importer's notes (categories read ignoring case, case IDs normalised, Excel day numbers, near
matches) are listed after a check and after the import. The preview is read with the importer's
reader, so a hostile workbook is refused before it is opened.
"""

from __future__ import annotations

import re
from pathlib import Path

from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QFileDialog, QFormLayout, QHBoxLayout, QLabel,
                               QLineEdit, QListWidget, QProgressBar, QPushButton, QSpinBox, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from .workers import JobRunner

PREVIEW_ROWS = 8
LEAVE_OUT = "(leave out)"

_SUGGESTED_FORMAT = re.compile(r"try --date-format ('[^']+'|\S+)")


def read_preview(path, rows: int = PREVIEW_ROWS, header_row: int = 1) -> tuple:
    """Header and first rows of a CSV or XLSX file (text only, for showing), read with the importer's limits."""
    from caseview.timeline_io.reader import preview_rows

    return preview_rows(path, rows, header_row)


def suggested_date_format(messages) -> str | None:
    """The date format the importer's messages suggest (the first one), or None."""
    for text in messages:
        found = _SUGGESTED_FORMAT.search(str(text))
        if found:
            return found.group(1).strip("'")
    return None


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
        self.date_format = QLineEdit()
        self.date_format.setPlaceholderText("YYYY-MM-DD (leave empty), or e.g. %d/%m/%Y")
        self.date_format.setAccessibleName("Date format of the date column")
        self.date_format.setToolTip("How the file writes dates, as a strptime format: %d day, %m month, %Y year. "
                                    "Date cells of a workbook are always read as dates.")
        self.date_format.textChanged.connect(self._mapping_changed)
        self.header_row = QSpinBox()
        self.header_row.setRange(1, 10_000)
        self.header_row.setAccessibleName("Row holding the column names")
        self.header_row.valueChanged.connect(self._header_row_changed)
        self.use_suggestion = QPushButton()
        self.use_suggestion.setVisible(False)
        self.use_suggestion.clicked.connect(self._apply_suggestion)
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
        options = QHBoxLayout()
        options.addWidget(QLabel("Column names on row"))
        options.addWidget(self.header_row)
        options.addSpacing(16)
        options.addWidget(QLabel("Date format"))
        options.addWidget(self.date_format, 1)
        options.addWidget(self.use_suggestion)
        layout.addLayout(options)
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
        self.use_suggestion.setVisible(False)
        from caseview.errors import InputError

        ws = getattr(self.source, "workspace", lambda: None)()
        if hasattr(ws, "is_own_file") and ws.is_own_file(path):  # reading it with open() would drop our SQLite locks
            self.summary.setText(f"{self.path.name} is the workspace file itself, not a timeline file.")
            return
        try:
            header, rows = read_preview(path, header_row=self.header_row.value())
        except (InputError, OSError, ValueError) as exc:
            self.preview.setRowCount(0)
            text = str(exc) if isinstance(exc, InputError) else f"Cannot read {self.path.name}: {exc}"
            self.summary.setText(text)
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

    def _header_row_changed(self) -> None:
        if self.path is not None:
            self.load_file(self.path)

    def import_options(self) -> dict:
        """The date format and header row as ``import_timelines`` takes them."""
        text = self.date_format.text().strip()
        return {"date_format": text or None, "header_row": self.header_row.value()}

    def _apply_suggestion(self) -> None:
        self.date_format.setText(self.use_suggestion.property("format"))
        self.use_suggestion.setVisible(False)
        self.check()

    def _show_notes(self, result) -> None:
        for w in result.warnings:
            self.problems.addItem(f"warning: {w}")
        for n in result.notes:
            self.problems.addItem(f"note: {n}")

    def mapping_arguments(self) -> tuple:
        mapping = {s: c.currentText() for s, c in self.mapping.items() if c.currentText() not in (s, LEAVE_OUT)}
        drop = tuple(s for s, c in self.mapping.items() if c.currentText() == LEAVE_OUT)
        return mapping, drop

    # ---------------------------------------------------------------- checking / importing
    def _run(self, validate_only: bool):
        from caseview.storage import Workspace
        from caseview.timeline_io import import_timelines

        path, actor, ws_path = self.path, self.actor, self.source.path
        reopen = getattr(self.source, "open_workspace", None) or (lambda: Workspace.open(ws_path))
        mapping, drop = self.mapping_arguments()
        options = self.import_options()

        def job(callback):
            with reopen() as ws:  # a database workspace keeps the password the window was given
                return import_timelines(ws, path, actor, mapping=mapping, drop=drop, progress=callback,
                                        check_only=validate_only, **options)
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
        self._show_notes(result)
        self.summary.setText(f"The whole file is valid: importing it would add {result.contacts_added:,} contacts "
                             f"({result.cases_added:,} new cases) and skip {result.duplicates_skipped:,} exact "
                             "duplicates. Nothing is stored yet: press Import to store it (one transaction, "
                             "audited).")

    def _failed(self, message: str) -> None:
        self.check_button.setEnabled(True)
        self.checked_ok = False
        self.import_button.setEnabled(False)
        self.progress.setValue(0)
        lines = split_problems(message)
        self.summary.setText(lines[0] if lines else message)
        self.problems.clear()
        self.problems.addItems(lines[1:] or lines)
        suggestion = suggested_date_format(lines)
        if suggestion is not None:
            self.use_suggestion.setProperty("format", suggestion)
            self.use_suggestion.setText(f"Use date format {suggestion}")
            self.use_suggestion.setToolTip(f"Set the date format to {suggestion} and check again")
        self.use_suggestion.setVisible(suggestion is not None)

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
        self._show_notes(result)
        self.summary.setText(f"Imported {result.contacts_added:,} contacts ({result.cases_added:,} new cases, "
                             f"{result.duplicates_skipped:,} duplicates skipped).")
        self.accept()

    def done(self, code) -> None:
        self.jobs.shutdown()
        super().done(code)
