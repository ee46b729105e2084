"""The Outlook tab: how many open cases will be in each stage at each coming month end, and where to invest places.

The panel shows state and runs the application functions of :mod:`caseview.operations.outlook`
(the same ones ``caseview outlook`` and ``caseview target`` call) in the window's worker pool, with
progress and cancel; it never computes statistics itself. The outlook is worked out when the tab
is first shown for a workspace and as-of date (and on *Update*); the targeting list on *Rank*.
The targeting part lives in :mod:`caseview.gui.outlook_targeting`.
"""

from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QFileDialog, QHBoxLayout, QLabel, QProgressBar, QPushButton,
                               QSpinBox, QSplitter, QVBoxLayout, QWidget)

from caseview import ADVISORY_NOTICE
from caseview.operations import DEFAULT_SEED

from .outlook_targeting import TargetingArea

REFERRAL_CHOICES = (("auto", "estimated"), ("none", "left out"), ("fixed", "fixed number"))
UNCERTAINTY_CHOICES = (("none", "given the model"), ("parameters", "+ parameter uncertainty"))


def outlook_key(window):
    """What the outlook was worked out for: the caseload the window shows (None when there is none)."""
    loaded = getattr(window, "loaded", None)
    return None if loaded is None else id(loaded)


class OutlookPanel(QWidget):
    """Controls, the referral assumption, the chart, and the targeting tool.

    Signals
    -------
    outlook_ready(object)
        A finished :class:`caseview.followup.outlook.Outlook`.
    """

    outlook_ready = Signal(object)

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window
        self.outlook = None
        self._shown_for = None
        self.canvas = None
        self._build()

    # ------------------------------------------------------------------ building
    def _build(self) -> None:
        self.months = QSpinBox(minimum=1, maximum=120, value=12, suffix=" months")
        self.months.setAccessibleName("Months ahead")
        self.referrals = QComboBox()
        for key, text in REFERRAL_CHOICES:
            self.referrals.addItem(text, key)
        self.referrals.setAccessibleName("New referrals")
        self.referral_rate = QDoubleSpinBox(minimum=0.0, maximum=100000.0, value=10.0, decimals=1, suffix=" a month")
        self.referral_rate.setAccessibleName("New referrals a month")
        self.referral_rate.setEnabled(False)
        self.referrals.currentIndexChanged.connect(
            lambda: self.referral_rate.setEnabled(self.referrals.currentData() == "fixed"))
        self.uncertainty = QComboBox()
        for key, text in UNCERTAINTY_CHOICES:
            self.uncertainty.addItem(text, key)
        self.uncertainty.setAccessibleName("Uncertainty in the bands")
        self.draws = QSpinBox(minimum=10, maximum=5000, value=200, suffix=" draws")
        self.draws.setAccessibleName("Parameter draws")
        self.coordinator = QComboBox()
        self.coordinator.addItem("all coordinators", None)
        self.coordinator.setAccessibleName("Coordinator")
        self.update_button = QPushButton("Update outlook")
        self.update_button.clicked.connect(self.compute)
        self.export_button = QPushButton("Export outlook…")
        self.export_button.setEnabled(False)
        self.export_button.clicked.connect(self.export_dialog)
        self.progress = QProgressBar(maximum=100, textVisible=False)
        self.progress.setMaximumWidth(140)
        self.progress.hide()
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.hide()
        self.cancel_button.clicked.connect(lambda: self.window.jobs.cancel("outlook"))
        self.uncertainty.setToolTip("Bands given the model, or widened by drawing all the model's parameters from the "
                                    "fit's estimated sampling distribution (fitted models): each draw moves where "
                                    "cases are now and where they go")
        self.referrals.setToolTip("New referrals: estimated from the first contacts of the last year, left out, "
                                  "or a fixed number a month")
        controls = QHBoxLayout()
        for widget in (QLabel("Ahead"), self.months, QLabel("Referrals"), self.referrals, self.referral_rate):
            controls.addWidget(widget)
        controls.addStretch(1)
        bands = QHBoxLayout()
        for widget in (QLabel("Bands"), self.uncertainty, self.draws, self.coordinator):
            bands.addWidget(widget)
        bands.addStretch(1)
        buttons = QHBoxLayout()
        for widget in (self.update_button, self.progress, self.cancel_button, self.export_button):
            buttons.addWidget(widget)
        buttons.addStretch(1)
        self.assumption = QLabel("Open a workspace to see the caseload outlook.")
        self.assumption.setObjectName("outlookAssumption")
        self.assumption.setWordWrap(True)
        self.assumption.setStyleSheet("font-weight: 600;")
        self.details = QLabel("")
        self.details.setWordWrap(True)
        self.details.setObjectName("outlookDetails")
        from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
        from matplotlib.figure import Figure

        self.canvas = FigureCanvasQTAgg(Figure(figsize=(8, 6)))
        self.canvas.setAccessibleName("Expected open cases in each stage at each month end, with 95% bands")
        self.canvas.setMinimumHeight(360)
        left = QWidget()
        column = QVBoxLayout(left)
        column.setContentsMargins(0, 0, 0, 0)
        column.addLayout(controls)
        column.addLayout(bands)
        column.addLayout(buttons)
        column.addWidget(self.assumption)
        column.addWidget(self.canvas, 1)
        column.addWidget(self.details)
        self.targeting = TargetingArea(self.window)
        split = QSplitter()
        split.addWidget(left)
        split.addWidget(self.targeting)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        split.setSizes([800, 580])
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(split)

    # ------------------------------------------------------------------ state
    def source_changed(self) -> None:
        """A new workspace or as-of date: forget the old outlook (worked out again when shown)."""
        self.window.jobs.cancel("outlook")
        self.outlook = None
        self._shown_for = None
        self.export_button.setEnabled(False)
        self.targeting.source_changed()
        if self.isVisible():
            self.compute()
            self.targeting.rank()

    def caseload_loaded(self, loaded) -> None:
        """Fill the coordinator and change choices from the newly scored caseload."""
        import numpy as np

        current = self.coordinator.currentData()
        self.coordinator.blockSignals(True)
        self.coordinator.clear()
        self.coordinator.addItem("all coordinators", None)
        for code in sorted(set(np.asarray(loaded.scores.coordinators).astype(str)) - {""}):
            self.coordinator.addItem(f"coordinator {code}", code)
        index = self.coordinator.findData(current)
        self.coordinator.setCurrentIndex(max(0, index))
        self.coordinator.blockSignals(False)
        self.targeting.set_covariates(loaded.scores.model.covariates)
        if self._shown_for != outlook_key(self.window):
            self.source_changed()

    def showEvent(self, event) -> None:
        super().showEvent(event)
        key = outlook_key(self.window)
        if self.outlook is None and key is not None and self._shown_for != key and not self.window.jobs.busy("outlook"):
            self.compute()
            self.targeting.rank()

    # ------------------------------------------------------------------ outlook job
    def options(self) -> dict:
        referrals = self.referrals.currentData()
        return {"months": self.months.value(),
                "referrals": self.referral_rate.value() if referrals == "fixed" else referrals,
                "uncertainty": self.uncertainty.currentData(), "draws": self.draws.value(), "seed": DEFAULT_SEED,
                "coordinator": self.coordinator.currentData()}

    def compute(self) -> None:
        """Work out the outlook of the caseload the window shows (its scores; no second scoring)."""
        loaded = getattr(self.window, "loaded", None)
        if loaded is None:
            self.assumption.setText("Open a workspace to see the caseload outlook.")
            return
        scores, options = loaded.scores, self.options()
        ws = self.window.workspace()
        version = ws.current_model()[1] if ws is not None else None
        self._shown_for = outlook_key(self.window)
        from caseview.operations.outlook import outlook_from_scores

        def work(callback):
            return outlook_from_scores(scores, version, scores.as_of, callback=callback, **options)

        self.progress.setValue(0)
        self.progress.show()
        self.cancel_button.show()
        self.update_button.setEnabled(False)
        self.assumption.setText(f"Working out the outlook as of {scores.as_of.isoformat()}…")
        self.window.jobs.start("outlook", work, on_finished=self._finished, on_failed=self._failed,
                               on_progress=lambda f: self.progress.setValue(int(100 * f)),
                               on_cancelled=self._cancelled)

    def _ended(self) -> None:
        self.progress.hide()
        self.cancel_button.hide()
        self.update_button.setEnabled(True)

    def _finished(self, outlook) -> None:
        from caseview.operations.outlook import outlook_notes
        from caseview.reports.outlook_chart import draw_outlook

        self._ended()
        self.outlook = outlook
        notes = outlook_notes(outlook)
        self.assumption.setText(notes[1])
        self.details.setText(f"{notes[0]} {notes[2]} {ADVISORY_NOTICE}")
        draw_outlook(self.canvas.figure, outlook)
        self.canvas.draw_idle()
        self.export_button.setEnabled(True)
        self.outlook_ready.emit(outlook)

    def _failed(self, message: str) -> None:
        self._ended()
        self.assumption.setText(f"The outlook could not be worked out: {message}")

    def _cancelled(self) -> None:
        self._ended()
        self.assumption.setText("Outlook cancelled." + (" The chart shows the previous one." if self.outlook else ""))

    def export_dialog(self) -> None:
        if self.outlook is None:
            return
        path, _ = QFileDialog.getSaveFileName(self, "Export outlook", "outlook.csv", "CSV (*.csv)")
        if path:
            self.export(path)

    def export(self, path) -> None:
        from caseview.errors import CaseviewError
        from caseview.operations.outlook import export_outlook

        try:
            export_outlook(self.outlook, path)
        except CaseviewError as exc:
            self.window.show_error(str(exc))
            return
        self.window.statusBar().showMessage(f"Wrote {path}")
