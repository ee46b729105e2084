"""Model panel: diagram, mean time in stage, hazard ratios, observation probabilities, fit, versions.

Fitting and the fit check go through :mod:`caseview.operations.fitting` (the command line's functions):
the fit runs in a worker on the contacts up to the window's as-of date, is stored as a new version that
is *not* current yet, and a before/after preview (flags gained and lost, the biggest changes in
P(follow-up now)) asks whether to make it current.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QComboBox, QHBoxLayout, QLabel, QListWidget,
                               QListWidgetItem, QProgressBar, QPushButton, QSpinBox, QSplitter, QTableWidget,
                               QTableWidgetItem, QTabWidget, QVBoxLayout, QWidget)

from .fit_preview import FitPreviewBox
from .model_editor import ModelEditor
from .transition_diagram import TransitionDiagram
from .workers import JobRunner


def _table(headers) -> QTableWidget:
    t = QTableWidget(0, len(headers))
    t.setHorizontalHeaderLabels(headers)
    t.verticalHeader().hide()
    t.setEditTriggers(QAbstractItemView.NoEditTriggers)
    t.horizontalHeader().setStretchLastSection(True)
    return t


def _fill(table: QTableWidget, rows) -> None:
    table.setRowCount(len(rows))
    for i, row in enumerate(rows):
        for j, value in enumerate(row):
            table.setItem(i, j, QTableWidgetItem(str(value)))
    table.resizeColumnsToContents()


def _short(name: str) -> str:
    """'mean time in Stable (days)' -> 'Stable'."""
    text = str(name)
    if text.startswith("mean time in "):
        text = text[len("mean time in "):]
    return text[:-len(" (days)")] if text.endswith(" (days)") else text


def _interval(estimate, fmt=lambda v: f"{v:,.1f}") -> str:
    """A fitted estimate's interval cell: the range and its kind (profile or Wald), or why there is none."""
    return estimate.interval_text(fmt)


class ModelPanel(QWidget):
    """Shows the current model; fits it in a worker (progress, cancel) and stores new versions."""

    fit_finished = Signal(object)   # hmm.fitting.FitResult (the fitted version is stored, not yet current)
    fit_decided = Signal(bool)      # True: the fitted version was made current
    fit_cancelled = Signal()
    fit_failed = Signal(str)

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window
        self.source = None
        self.model = None
        self.version = None
        self.jobs = JobRunner(self, max_threads=1)
        self._pending = None   # the SavedFit whose preview is shown
        self.diagram = TransitionDiagram()
        self.heading = QLabel("No model loaded")
        self.heading.setWordWrap(True)
        self.time_in_stage_table = _table(["Stage", "Mean time in stage (days)", "95% interval (kind)"])
        self.hazards = _table(["Effect", "Hazard ratio", "95% interval (kind)"])
        self.emissions = _table(["Channel", "Stage", "Probabilities"])
        self.contact_rates = _table(["Stage", "Unscheduled contacts per year", "95% interval"])
        self.fit_chart_holder = QVBoxLayout()
        self.fit_chart_note = QLabel("Fit the model to see how the log-likelihood improved.")
        self.fit_chart_note.setWordWrap(True)
        self.fit_chart_holder.addWidget(self.fit_chart_note)
        self.fit_canvas = None
        fit_tab = QWidget()
        fit_tab.setLayout(self.fit_chart_holder)
        self.versions = QListWidget()
        self.versions.setAccessibleName("Model versions")
        self.make_current = QPushButton("Make current")
        self.make_current.clicked.connect(self._make_current)
        versions_tab = QWidget()
        v = QVBoxLayout(versions_tab)
        v.addWidget(self.versions, 1)
        v.addWidget(self.make_current)
        self.editor = ModelEditor()
        self.editor.save_requested.connect(self._save_edited)
        self.editor.staff.clicked.connect(self._staff_estimates)
        from .model_summary_view import ModelSummaryView

        self.summary_view = ModelSummaryView()
        self.details = QTabWidget()
        self.details.setUsesScrollButtons(True)
        self.details.addTab(self.summary_view, "In plain words")
        self.details.addTab(self.time_in_stage_table, "Time in stage")
        self.details.addTab(self.hazards, "Hazard ratios")
        self.details.addTab(self.emissions, "Observation probabilities")
        self.details.addTab(self.contact_rates, "Unscheduled contacts")
        self.details.addTab(fit_tab, "Fit statistics")
        self._add_fit_check()
        self.details.addTab(versions_tab, "Versions")
        self.details.addTab(self.editor, "Edit model")

        self.fit_button = QPushButton("Fit to caseload")
        self.fit_button.setAccessibleName("Fit the model to the caseload")
        self.fit_button.clicked.connect(self.start_fit)
        self.cancel_button = QPushButton("Cancel fit")
        self.cancel_button.setEnabled(False)
        self.cancel_button.clicked.connect(self.cancel_fit)
        self.starts = QSpinBox()
        self.starts.setRange(1, 20)
        self.starts.setValue(3)
        self.starts.setPrefix("starts: ")
        self.starts.setAccessibleName("Number of fitting starts")
        self.penalised = QCheckBox("Penalised (gentle prior)")
        self.intervals = QComboBox()
        for label, kind in (("intervals: automatic", "auto"), ("intervals: profile", "profile"),
                            ("intervals: Wald", "wald")):
            self.intervals.addItem(label, kind)
        self.intervals.setAccessibleName("Kind of 95% interval (automatic: profile likelihood below 5,000 cases)")
        self.calibration = QSpinBox()
        self.calibration.setRange(-1, 1000)
        self.calibration.setSpecialValueText("calibration: auto")
        self.calibration.setPrefix("calibration refits: ")
        self.calibration.setValue(-1)
        self.calibration.setAccessibleName("Refits of simulated caseloads that calibrate the intervals' width "
                                           "(automatic: 40 below 5,000 cases; 0: off)")
        self.calibration.setToolTip("Below a few thousand cases 95% intervals from chi-squared theory were measured "
                                    "too narrow; refits of caseloads simulated from the fitted model widen them to "
                                    "what those refits needed. Each refit is a whole fit.")
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.progress.setAccessibleName("Fitting progress")
        self.fit_message = QLabel("")
        self.fit_message.setWordWrap(True)
        self.fit_warnings = QListWidget()
        self.fit_warnings.setAccessibleName("Warnings from the last fit")
        self.fit_warnings.setMaximumHeight(150)
        self.fit_warnings.setWordWrap(True)
        self.fit_warnings.hide()
        fit_row = QHBoxLayout()
        for w in (self.fit_button, self.starts, self.penalised, self.intervals, self.calibration, self.progress,
                  self.cancel_button):
            fit_row.addWidget(w)
        self.preview = FitPreviewBox()
        self.preview.decided.connect(self.decide)
        self.use_fitted, self.keep_current = self.preview.use_fitted, self.preview.keep_current

        left = QWidget()
        lv = QVBoxLayout(left)
        lv.addWidget(self.heading)
        lv.addWidget(self.diagram, 1)
        lv.addLayout(fit_row)
        lv.addWidget(self.fit_message)
        lv.addWidget(self.fit_warnings)
        lv.addWidget(self.preview)
        split = QSplitter(Qt.Horizontal)
        split.addWidget(left)
        split.addWidget(self.details)
        split.setStretchFactor(0, 1)
        split.setStretchFactor(1, 1)
        self.details.setMinimumWidth(540)
        layout = QVBoxLayout(self)
        layout.addWidget(split)

    # ------------------------------------------------------------------ showing
    def set_source(self, source) -> None:
        self.source = source
        self.refresh()

    def refresh(self) -> None:
        ws = self.window.workspace()
        versions = []
        if ws is not None:
            self.model, self.version = ws.current_model()
            versions = ws.model_versions()
        elif self.source is not None:
            self.model, self.version = self.source.current_model(), None
        self.diagram.set_model(self.model)
        self._fill_versions(versions)
        if self.model is None:
            return
        summary = self._summary()
        label = f"version {self.version.id}" if self.version is not None else "in memory"
        fitted = "fitted" if summary else "not fitted to this caseload yet (values as entered)"
        if summary is not None:
            fitted += f" ({summary.interval_label()})"
        self.heading.setText(f"<b>{self.model.name}</b> — {label}, {fitted}. Rates and probabilities are "
                             "estimates; advisory only.")
        self.heading.setToolTip("" if summary is None else "\n".join(
            line for line in (summary.calibration.describe() if summary.calibration else "",
                              summary.interval_caveat()) if line))
        self.summary_view.set_model(self.model, self.version)
        self._fill_time_in_stage(summary)
        self._fill_hazards(summary)
        self._fill_emissions()
        self._fill_contact_rates(summary)
        self._draw_fit_history(summary)
        self.fit_check.model_changed()
        from caseview.modelfile import dump_model

        self.editor.set_text(self.version.json_text if self.version is not None else dump_model(self.model))

    def _summary(self):
        """The current version's FitSummary (None when entered, not fitted, or unreadable)."""
        from caseview.errors import InputError
        from caseview.operations.fitting import stored_fit_summary

        if self.version is None:
            return None
        try:
            return stored_fit_summary(self.version)
        except InputError:
            return None

    def _fill_time_in_stage(self, summary) -> None:
        if summary is not None and summary.mean_time_in_stage:
            rows = [(e.stage or e.name, f"{e.estimate:,.1f}", _interval(e)) for e in summary.mean_time_in_stage]
        else:
            q = self.model.generator()
            rows = [(s, f"{-1 / q[r, r]:,.1f}" if q[r, r] < 0 else "no way out", "–")
                    for r, s in enumerate(self.model.stages)]
        _fill(self.time_in_stage_table, rows)

    def _fill_hazards(self, summary) -> None:
        if summary is not None and summary.hazard_ratios:
            rows = [(e.name, f"{e.estimate:.2f}", _interval(e, lambda v: f"{v:.2f}")) for e in summary.hazard_ratios]
        else:
            m = self.model
            rows = [(f"{name} on {m.stages[t.source]} → {m.stages[t.target]}", f"{np.exp(beta):.2f}",
                     "–") for t in m.transitions for name, beta in t.effects.items()]
        _fill(self.hazards, rows)

    def _fill_contact_rates(self, summary) -> None:
        """Unscheduled contacts per year in each stage (rows from caseview.reports.model_summary)."""
        from caseview.reports.model_summary import unscheduled_contacts_per_year

        rows = unscheduled_contacts_per_year(self.model, summary)
        index = self.details.indexOf(self.contact_rates)
        self.details.setTabVisible(index, bool(rows))
        _fill(self.contact_rates, [(r.stage, f"{r.per_year:,.1f}",
                                    f"{r.lower:,.1f} to {r.upper:,.1f}" if r.lower is not None and r.upper is not None
                                    else "–") for r in rows])

    def _fill_emissions(self) -> None:
        rows = []
        for c in self.model.channels:
            for r, stage in enumerate(self.model.stages):
                rows.append((c.name, stage, "  ".join(f"{cat} {p * 100:.0f}%" for cat, p in
                                                      zip(c.categories, c.probabilities[r]))))
        _fill(self.emissions, rows)

    def _fill_versions(self, versions) -> None:
        self.versions.clear()
        for v in versions:
            item = QListWidgetItem(f"{'● ' if v.is_current else '   '}version {v.id} · {v.created_utc} · "
                                   f"{'fitted' if v.fit_summary else 'entered'} · {v.note}")
            item.setData(Qt.UserRole, v.id)
            self.versions.addItem(item)
        self.make_current.setEnabled(bool(versions))

    def _draw_fit_history(self, summary) -> None:
        if not summary:
            self.fit_chart_note.setText("This version was entered, not fitted. Fit the model to see how the "
                                        "log-likelihood improved, with AIC and BIC.")
            if self.fit_canvas is not None:
                self.fit_canvas.hide()
            return
        numbers = " · ".join(f"{name} {value:,.1f}" if value is not None else f"{name} not finite"
                             for name, value in (("log-likelihood", summary.log_likelihood), ("AIC", summary.aic),
                                                 ("BIC", summary.bic)))
        used = f"contacts up to {summary.contacts_as_of}" if summary.contacts_as_of else "all contacts"
        self.fit_chart_note.setText(f"{numbers} · converged: {'yes' if summary.converged else 'NO'} · "
                                    f"{summary.n_cases} cases ({used}) · {summary.interval_label()}")
        history = [h for h in summary.history if h.log_likelihood is not None]
        if not history:
            if self.fit_canvas is not None:
                self.fit_canvas.hide()
            return
        if self.fit_canvas is None:
            from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
            from matplotlib.figure import Figure

            self.fit_canvas = FigureCanvasQTAgg(Figure(figsize=(4, 3), layout="constrained"))
            self.fit_canvas.setAccessibleName("Log-likelihood by fitting iteration")
            self.fit_chart_holder.addWidget(self.fit_canvas, 1)
        self.fit_canvas.show()
        figure = self.fit_canvas.figure
        figure.clear()
        axis = figure.add_subplot()
        axis.plot([h.iteration for h in history], [h.log_likelihood for h in history], "-o", ms=3,
                  color="#0072B2")
        axis.set_xlabel("iteration")
        axis.set_ylabel("log-likelihood")
        axis.set_title("Convergence of the fit", fontsize=9, loc="left")
        self.fit_canvas.draw_idle()

    # ------------------------------------------------------------------ fitting
    def start_fit(self) -> None:
        self.fit_warnings.hide()
        self.preview.hide()
        loaded = self.window.loaded
        if loaded is None or self.model is None:
            self.fit_message.setText("Open and score a caseload first.")
            return
        from caseview.followup import default_rules, workspace_rules
        from caseview.operations.fitting import FitOptions, compute_fit, preview_fit

        lost = loaded.scores.unscorable
        if lost.n_cases:   # the refusal compute_fit would give (operations.fit_guards), without starting a job
            self.fit_message.setText(f"Cannot fit: {lost.summary()}; correct or void those records first. "
                                     "Nothing was fitted or saved.")
            return

        inputs = self._inputs()
        ws = self.window.workspace()
        rules = workspace_rules(ws) if ws is not None else default_rules()
        options = FitOptions(starts=self.starts.value(), penalised=self.penalised.isChecked(),
                             intervals=self.intervals.currentData(),
                             calibration_draws=None if self.calibration.value() < 0 else self.calibration.value())
        horizon = float(loaded.scores.horizon_days)

        def job(callback):
            outcome = compute_fit(inputs, options, callback=lambda f: callback(0.95 * f))
            preview = preview_fit(outcome, inputs.contacts_as_of, horizon, rules)
            callback(1.0)
            return outcome, preview

        self.progress.setValue(0)
        self.fit_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.fit_message.setText(f"Fitting to {inputs.timelines.n_cases:,} cases ({inputs.timelines.n_contacts:,} "
                                 f"{inputs.contacts_text})…")
        self.jobs.start("fit", job, on_finished=self._fitted, on_failed=self._fit_failed,
                        on_cancelled=self._fit_cancelled, on_progress=lambda f: self.progress.setValue(int(100 * f)))

    def _inputs(self):
        """The fit's inputs: the scored caseload (contacts up to the as-of date it was scored at)."""
        from caseview.operations.fitting import FitInputs

        scores = self.window.loaded.scores
        return FitInputs(self.model, None if self.version is None else self.version.id, scores.caseload,
                         scores.as_of, entered_not_fitted=self._summary() is None)

    def cancel_fit(self) -> None:
        self.jobs.cancel("fit")
        self.fit_message.setText("Cancelling…")

    def _fit_done(self) -> None:
        self.fit_button.setEnabled(True)
        self.cancel_button.setEnabled(False)

    def _fitted(self, payload) -> None:
        from caseview.errors import FitRefused, InputError
        from caseview.operations.fitting import save_fit

        outcome, preview = payload
        result = outcome.result
        self._fit_done()
        self.progress.setValue(100)
        self.fit_warnings.clear()
        self.fit_warnings.addItems([str(w) for w in result.warnings])
        self.fit_warnings.setVisible(bool(result.warnings))
        warnings = (f"{len(result.warnings)} warning{'s' if len(result.warnings) != 1 else ''} below: read them "
                    "before relying on the new version." if result.warnings else "")
        ws = self.window.workspace()
        if ws is None:
            self.fit_message.setText(f"Fit finished (log-likelihood {result.log_likelihood:,.1f}); not saved "
                                     f"(no workspace). {warnings}")
            self.fit_finished.emit(result)
            return
        try:
            saved = save_fit(ws, outcome, self.window.actor, make_current=False)
        except (InputError, FitRefused) as exc:
            self.fit_message.setText(f"Fit failed: {exc}")
            self.fit_failed.emit(str(exc))
            return
        self._pending = saved
        self.fit_message.setText(f"Fit finished (log-likelihood {result.log_likelihood:,.1f}, "
                                 f"{outcome.summary.interval_label()}); stored as version {saved.version_id}. "
                                 f"{warnings}")
        self.preview.show_preview(saved, preview)
        self._fill_versions(ws.model_versions())
        self.fit_finished.emit(result)

    def decide(self, make_current: bool) -> None:
        """The user's answer to the preview: make the fitted version current (audited) or keep the current one."""
        from caseview.operations.fitting import make_version_current

        saved, self._pending = self._pending, None
        self.preview.hide()
        if saved is None:
            return
        ws = self.window.workspace()
        if make_current and ws is not None:
            make_version_current(ws, saved.version_id, self.window.actor)
            self.fit_message.setText(f"Version {saved.version_id} is now current for scoring.")
            self.refresh()
            self.window.rescore()
        else:
            self.fit_message.setText(f"Version {saved.version_id} is stored; the current version is unchanged "
                                     "(choose it under Versions to use it later).")
        self.fit_decided.emit(bool(make_current))

    def _fit_failed(self, message: str) -> None:
        self._fit_done()
        self.fit_message.setText(f"Fit failed: {message}")
        self.fit_failed.emit(message)

    def _fit_cancelled(self) -> None:
        self._fit_done()
        self.progress.setValue(0)
        self.fit_message.setText("Fit cancelled; nothing was saved.")
        self.fit_cancelled.emit()

    # ------------------------------------------------------------------ versions & editing
    def _make_current(self) -> None:
        item = self.versions.currentItem()
        ws = self.window.workspace()
        if item is None or ws is None:
            return
        ws.set_current_model(int(item.data(Qt.UserRole)), self.window.actor)
        self.refresh()
        self.window.rescore()

    def _save_edited(self, text: str) -> None:
        ws = self.window.workspace()
        if ws is None or self.editor.validate() is None:
            self.window.show_error("Open a workspace to save model versions.")
            return
        version = ws.add_model_version(text, "edited in the window", self.window.actor, make_current=True)
        self.window.statusBar().showMessage(f"Saved model version {version}.")
        self.refresh()
        self.window.rescore()

    def _staff_estimates(self) -> None:
        """Open the staff-estimates dialog on the current stages; its model lands in the editor, unsaved."""
        from .staff_estimates_dialog import StaffEstimatesDialog

        model = self.editor.model or self.model
        if model is None:
            self.window.show_error("Open a workspace first: the staff estimates start from its model's stages.")
            return
        self.staff_dialog = StaffEstimatesDialog(model, parent=self)
        self.staff_dialog.model_ready.connect(self._staff_model_ready)
        self.staff_dialog.open()

    def _staff_model_ready(self, text: str) -> None:
        self.editor.set_text(text)
        self.details.setCurrentWidget(self.editor)
        self.editor.message.setText(self.editor.message.text() + " Built from staff estimates; check it, then "
                                    "save it as a new model version (and fit it when there are enough cases).")

    # ------------------------------------------------------------------ fit check (goodness of fit)
    def _add_fit_check(self) -> None:
        from .fit_check_chart import FitCheckArea

        def inputs():
            return None if self.window.loaded is None or self.model is None else self._inputs()

        self.fit_check = FitCheckArea(inputs)
        self.fit_check.finished.connect(self._fit_checked)
        self.details.addTab(self.fit_check, "Fit check")

    def _fit_checked(self, result) -> None:
        from caseview.operations.fitting import record_fit_check

        ws = self.window.workspace()
        if ws is not None and self.fit_check.outcome is not None and self.fit_check.outcome.result is result:
            record_fit_check(ws, self.fit_check.outcome, self.window.actor)

    def shutdown(self) -> None:
        self.fit_check.shutdown()
        self.jobs.shutdown()
