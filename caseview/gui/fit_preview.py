"""The before/after preview of a fit: what making the fitted version current would change, and the question.

The numbers come from :func:`caseview.operations.fitting.preview_fit`; this box only shows them and
emits :attr:`FitPreviewBox.decided` with the answer (the panel calls the application layer).
"""

from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QGroupBox, QHBoxLayout, QLabel, QPushButton, QVBoxLayout

from caseview import ADVISORY_NOTICE


def preview_text(saved, preview) -> str:
    """Plain words for the before/after preview of a stored fit (rich text)."""
    lines = [f"<b>Version {saved.version_id} is stored but not current yet.</b> As of "
             f"{preview.as_of.isoformat()}, making it current would:"]
    gained, lost = preview.gained, preview.lost
    lines.append(f"• flag {len(gained)} case{'s' if len(gained) != 1 else ''} not flagged now"
                 + (f" ({', '.join(gained[:8])}{', …' if len(gained) > 8 else ''})" if gained else ""))
    lines.append(f"• clear the flag of {len(lost)} case{'s' if len(lost) != 1 else ''}"
                 + (f" ({', '.join(lost[:8])}{', …' if len(lost) > 8 else ''})" if lost else ""))
    if preview.biggest_changes:
        changes = ", ".join(f"{case} {before * 100:.0f}% → {after * 100:.0f}%"
                            for case, before, after in preview.biggest_changes[:5])
        lines.append(f"• biggest changes in the chance of being in a follow-up stage now: {changes}")
    lines.append(ADVISORY_NOTICE)
    return "<br>".join(lines)


class FitPreviewBox(QGroupBox):
    """Shows a stored fit's preview and asks whether to make it current."""

    decided = Signal(bool)   # True: make the fitted version current

    def __init__(self, parent=None):
        super().__init__("Before and after the fit", parent)
        self.text = QLabel("")
        self.text.setWordWrap(True)
        self.text.setTextFormat(Qt.RichText)
        self.use_fitted = QPushButton("Make the fitted version current")
        self.use_fitted.setAccessibleName("Make the fitted model version current for scoring")
        self.use_fitted.clicked.connect(lambda: self.decided.emit(True))
        self.keep_current = QPushButton("Keep the current version")
        self.keep_current.clicked.connect(lambda: self.decided.emit(False))
        layout = QVBoxLayout(self)
        layout.addWidget(self.text)
        buttons = QHBoxLayout()
        buttons.addWidget(self.use_fitted)
        buttons.addWidget(self.keep_current)
        layout.addLayout(buttons)
        self.hide()

    def show_preview(self, saved, preview) -> None:
        self.text.setText(preview_text(saved, preview))
        self.show()
