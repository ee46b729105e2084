"""Model editor: the model JSON with validation as you type (caseview.modelfile.parse_model)."""

from __future__ import annotations

import re

from PySide6.QtCore import QTimer, Signal
from PySide6.QtGui import QFont, QTextCursor
from PySide6.QtWidgets import QHBoxLayout, QLabel, QPlainTextEdit, QPushButton, QVBoxLayout, QWidget

from . import theme


class ModelEditor(QWidget):
    """Emits ``save_requested(json_text)`` when the text is a valid model and the user saves it."""

    save_requested = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.text = QPlainTextEdit()
        self.text.setAccessibleName("Model file text (JSON)")
        mono = QFont("monospace")
        mono.setStyleHint(QFont.Monospace)
        self.text.setFont(mono)
        self.message = QLabel("")
        self.message.setWordWrap(True)
        self.message.setAccessibleName("Model validation result")
        self.save = QPushButton("Save as new model version")
        self.save.setAccessibleName("Save the edited model as a new version")
        self.save.clicked.connect(lambda: self.save_requested.emit(self.text.toPlainText()))
        self.staff = QPushButton("Start from staff estimates…")
        self.staff.setToolTip("Build rates from typical times in stage given by experienced staff")
        row = QHBoxLayout()
        row.addWidget(self.message, 1)
        row.addWidget(self.staff)
        row.addWidget(self.save)
        layout = QVBoxLayout(self)
        intro = QLabel("Edit the model (stages, transitions, channels, fixed values, follow-up stages). "
                       "It is checked as you type; only a valid model can be saved.")
        intro.setWordWrap(True)
        layout.addWidget(intro)
        layout.addWidget(self.text, 1)
        layout.addLayout(row)
        self._timer = QTimer(self, singleShot=True, interval=250, timeout=self.validate)
        self.text.textChanged.connect(self._timer.start)
        self.model = None

    def set_text(self, text: str) -> None:
        self.text.setPlainText(text)
        self.validate()

    def validate(self):
        """Parse the text; show the precise message; return the StageModel or None."""
        from caseview.errors import InputError
        from caseview.modelfile import parse_model

        try:
            self.model = parse_model(self.text.toPlainText(), source="model")
        except InputError as exc:
            self.model = None
            message = str(exc)
            self.message.setText(f"<span style='color:{theme.colour('risk_high')}'>✗</span> {message}")
            self.save.setEnabled(False)
            match = re.search(r"line (\d+), column (\d+)", message)
            if match:
                self._mark(int(match.group(1)), int(match.group(2)))
            return None
        self.message.setText(f"<span style='color:{theme.colour('ok')}'>✓</span> Valid model: "
                             f"{self.model.n_stages} stages, {len(self.model.transitions)} transitions, "
                             f"{len(self.model.channels)} channels, {self.model.n_covariates} covariates.")
        self.save.setEnabled(True)
        return self.model

    def _mark(self, line: int, column: int) -> None:
        block = self.text.document().findBlockByLineNumber(line - 1)
        if block.isValid():
            cursor = QTextCursor(block)
            cursor.movePosition(QTextCursor.Right, n=max(0, column - 1))
            self.text.setExtraSelections([])
            from PySide6.QtWidgets import QTextEdit
            from PySide6.QtGui import QColor

            sel = QTextEdit.ExtraSelection()
            sel.cursor = cursor
            sel.cursor.movePosition(QTextCursor.EndOfLine, QTextCursor.KeepAnchor)
            sel.format.setBackground(QColor(theme.colour("risk_medium")).lighter(150))
            self.text.setExtraSelections([sel])
