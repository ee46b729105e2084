"""The model panel's "Fit check": goodness of fit computed in a worker, drawn as observed versus expected occupancy.

:class:`FitCheckArea` holds the controls (check, cancel, number of simulated caseloads, progress)
and runs :func:`caseview.operations.fitting.compute_fit_check` in a background job. :class:`FitCheckChart` draws
the result: for each observation channel, the share of contacts in each calendar-time bin that
recorded each category (dots) against the share the model predicted from each case's earlier
contacts (line, with a band of two standard errors). The view only draws; all numbers come from
the engine's result.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QHBoxLayout, QLabel, QProgressBar, QPushButton, QScrollArea, QSpinBox, QVBoxLayout,
                               QWidget)

from caseview.operations import DEFAULT_SEED

from . import theme
from .workers import JobRunner

#: Seed of the simulated caseloads, so a check repeated on the same data gives the same p-value.
CHECK_SEED = DEFAULT_SEED   # the command line's default seed too


def summary_text(result) -> str:
    """One paragraph for the window: the statistic, the p-value and what it means."""
    cells = f"{len(result.observed)} cells, {result.n_pairs:,} pairs of consecutive contacts"
    if not result.n_bootstrap:
        return f"Pearson-type statistic {result.statistic:,.1f} ({cells}); no p-value (no simulated caseloads)."
    how = "each refitted" if result.refit else "parameters not re-estimated, so the p-value is on the generous side"
    if result.p_value < 0.05:
        meaning = ("Small p-value: the recorded changes between contacts differ from what the model predicts "
                   "more than chance would explain. Look at the table (caseview check-fit) before relying on "
                   "the model.")
    else:
        meaning = "No clear sign of misfit in the changes between contacts (this does not prove the model right)."
    return (f"<b>Pearson-type statistic {result.statistic:,.1f}</b>, bootstrap <b>p = {result.p_value:.3f}</b> "
            f"({result.n_bootstrap} simulated caseloads; {how}; {cells}). {meaning}")


class FitCheckChart(QWidget):
    """Observed (dots) versus expected (line, ±2 SE band) share of each category over calendar time."""

    def __init__(self, parent=None):
        super().__init__(parent)
        from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
        from matplotlib.figure import Figure

        self.canvas = FigureCanvasQTAgg(Figure(figsize=(5, 6), layout="constrained"))
        self.canvas.setAccessibleName("Observed versus expected share of each category over time")
        self.canvas.setMinimumHeight(240)
        self.legend = QLabel("Dots: share of contacts that recorded each category, per calendar period. Line: the "
                             "share the model predicted from each case's earlier contacts. Band: ±2 standard errors.")
        self.legend.setWordWrap(True)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(self.canvas)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.legend)
        layout.addWidget(scroll, 1)
        self.occupancy = None

    def clear(self) -> None:
        self.occupancy = None
        self.canvas.figure.clear()
        self.canvas.draw_idle()

    def show_occupancy(self, occupancy) -> None:
        """Draw an :class:`hmm.fitting.OccupancyOverTime` (times are days since 1970-01-01)."""
        import matplotlib.dates as mdates

        self.occupancy = occupancy
        figure = self.canvas.figure
        figure.clear()
        channels = list(dict.fromkeys(occupancy.channel))
        self.canvas.setMinimumHeight(max(240, 150 * len(channels) + 30))
        axes = figure.subplots(len(channels), 1, sharex=True, squeeze=False)[:, 0]
        middles = occupancy.bin_middles
        for axis, channel in zip(axes, channels):
            rows = [i for i, c in enumerate(occupancy.channel) if c == channel]
            for colour, i in zip(theme.stage_colours(len(rows)), rows):
                expected, error = occupancy.expected[i], occupancy.standard_error[i]
                axis.fill_between(middles, np.clip(expected - 2 * error, 0, 1), np.clip(expected + 2 * error, 0, 1),
                                  color=colour, alpha=0.18, linewidth=0)
                axis.plot(middles, expected, "-", color=colour, linewidth=1.6)
                axis.plot(middles, occupancy.observed[i], "o", color=colour, markersize=4.5,
                          markeredgecolor="white", markeredgewidth=0.6, label=occupancy.category[i])
            axis.set_ylim(0, 1)
            axis.set_ylabel("share of contacts", fontsize=8)
            axis.set_title(channel, fontsize=9, loc="left", fontweight="bold")
            axis.tick_params(labelsize=8)
            axis.grid(axis="y", color="#DDDDDD", linewidth=0.6)
            axis.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, title="recorded",
                        title_fontsize=7)
        locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
        axes[-1].xaxis.set_major_locator(locator)
        axes[-1].xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
        self.canvas.draw_idle()


class FitCheckArea(QWidget):
    """Controls and chart of the fit check.

    Parameters
    ----------
    inputs : callable() -> caseview.operations.fitting.FitInputs or None
        What to check; called when the check starts (None: nothing loaded yet). The check itself is
        :func:`caseview.operations.fitting.compute_fit_check`, the command line's too.
    """

    finished = Signal(object)   # GoodnessOfFit
    failed = Signal(str)
    cancelled = Signal()

    def __init__(self, inputs, parent=None):
        super().__init__(parent)
        self.inputs = inputs
        self.jobs = JobRunner(self, max_threads=1)
        self.result = None
        self.outcome = None   # caseview.operations.fitting.FitCheckOutcome of the last check
        self.check_button = QPushButton("Check fit")
        self.check_button.setAccessibleName("Check how well the model fits the caseload")
        self.check_button.clicked.connect(self.start)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setEnabled(False)
        self.cancel_button.clicked.connect(self.cancel)
        self.bootstrap = QSpinBox()
        self.bootstrap.setRange(0, 9999)
        self.bootstrap.setValue(99)
        self.bootstrap.setPrefix("simulated caseloads: ")
        self.bootstrap.setAccessibleName("Number of simulated caseloads for the p-value")
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.progress.setAccessibleName("Fit check progress")
        self.summary = QLabel("Compare what was recorded at each contact with what the model predicted from the "
                              "earlier contacts. The p-value comes from caseloads simulated from the model.")
        self.summary.setWordWrap(True)
        self.notes = QLabel("")
        self.notes.setWordWrap(True)
        self.notes.hide()
        self.chart = FitCheckChart()
        row = QHBoxLayout()
        for w in (self.check_button, self.bootstrap, self.progress, self.cancel_button):
            row.addWidget(w)
        layout = QVBoxLayout(self)
        layout.addLayout(row)
        layout.addWidget(self.summary)
        layout.addWidget(self.chart, 1)
        layout.addWidget(self.notes)

    def start(self) -> None:
        inputs = self.inputs()
        if inputs is None:
            self.summary.setText("Open and score a caseload first.")
            return
        from caseview.operations.fitting import FitCheckOptions, compute_fit_check

        options = FitCheckOptions(bootstrap=self.bootstrap.value(), seed=CHECK_SEED)
        self.progress.setValue(0)
        self.check_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.summary.setText(f"Checking the fit on {inputs.timelines.n_cases:,} cases ({inputs.contacts_text}) with "
                             f"{options.bootstrap} simulated caseloads…")
        self.jobs.start("fit check", lambda callback: compute_fit_check(inputs, options, callback=callback),
                        on_finished=self._finished, on_failed=self._failed, on_cancelled=self._cancelled,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)))

    def cancel(self) -> None:
        self.jobs.cancel("fit check")
        self.summary.setText("Cancelling…")

    def model_changed(self) -> None:
        """The model or caseload changed: an earlier result no longer applies."""
        self.jobs.cancel("fit check")
        if self.result is not None:
            self.result = None
            self.chart.clear()
            self.notes.hide()
            self.progress.setValue(0)
            self.summary.setText("The model or caseload changed; check the fit again.")

    def _done(self) -> None:
        self.check_button.setEnabled(True)
        self.cancel_button.setEnabled(False)

    def _finished(self, outcome) -> None:
        self._done()
        self.outcome = outcome
        result = self.result = outcome.result
        self.progress.setValue(100)
        self.summary.setText(summary_text(result))
        # the summary already says whether the parameters were re-estimated
        notes = [w for w in result.warnings if "re-estimate" not in w]
        self.notes.setText("<i>Note: " + " · ".join(notes) + "</i>" if notes else "")
        self.notes.setVisible(bool(notes))
        if result.occupancy is not None:
            self.chart.show_occupancy(result.occupancy)
        self.finished.emit(result)

    def _failed(self, message: str) -> None:
        self._done()
        self.summary.setText(f"Fit check failed: {message}")
        self.failed.emit(message)

    def _cancelled(self) -> None:
        self._done()
        self.progress.setValue(0)
        self.summary.setText("Fit check cancelled.")
        self.cancelled.emit()

    def shutdown(self) -> None:
        self.jobs.shutdown()
