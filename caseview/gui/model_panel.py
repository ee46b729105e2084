"""Model panel: diagram, mean time in stage, hazard ratios, observation probabilities, fit, versions."""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QAbstractItemView, QCheckBox, QHBoxLayout, QLabel, QListWidget, QListWidgetItem,
                               QProgressBar, QPushButton, QSpinBox, QSplitter, QTableWidget, QTableWidgetItem,
                               QTabWidget, QVBoxLayout, QWidget)

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


def _interval(item: dict, fmt="{:,.1f}") -> str:
    if item.get("fixed"):
        return "fixed"
    lo, hi = item.get("lower"), item.get("upper")
    if lo is None or hi is None:
        return "–"
    if not item.get("informative", True):
        return "too wide to use (data say little)"
    return f"{fmt.format(lo)} – {fmt.format(hi)}"


class ModelPanel(QWidget):
    """Shows the current model; fits it in a worker (progress, cancel) and stores new versions."""

    fit_finished = Signal(object)   # FitResult
    fit_cancelled = Signal()
    fit_failed = Signal(str)

    def __init__(self, window, parent=None):
        super().__init__(parent)
        self.window = window
        self.source = None
        self.model = None
        self.version = None
        self.jobs = JobRunner(self, max_threads=1)
        self._last_fit = None  # (version id, history) of the fit made in this window
        self.diagram = TransitionDiagram()
        self.heading = QLabel("No model loaded")
        self.heading.setWordWrap(True)
        self.sojourn = _table(["Stage", "Mean time in stage (days)", "95% interval"])
        self.hazards = _table(["Effect", "Hazard ratio", "95% interval"])
        self.emissions = _table(["Channel", "Stage", "Probabilities"])
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
        self.details.addTab(self.sojourn, "Time in stage")
        self.details.addTab(self.hazards, "Hazard ratios")
        self.details.addTab(self.emissions, "Observation probabilities")
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
        for w in (self.fit_button, self.starts, self.penalised, self.progress, self.cancel_button):
            fit_row.addWidget(w)

        left = QWidget()
        lv = QVBoxLayout(left)
        lv.addWidget(self.heading)
        lv.addWidget(self.diagram, 1)
        lv.addLayout(fit_row)
        lv.addWidget(self.fit_message)
        lv.addWidget(self.fit_warnings)
        split = QSplitter(Qt.Horizontal)
        split.addWidget(left)
        split.addWidget(self.details)
        split.setStretchFactor(0, 1)
        split.setStretchFactor(1, 1)
        self.details.setMinimumWidth(540)
        layout = QVBoxLayout(self)
        layout.addWidget(split)
        if not self._fitting_available():
            self.fit_button.setEnabled(False)
            self.fit_message.setText("Fitting is not available yet in this build.")

    @staticmethod
    def _fitting_available() -> bool:
        try:
            import hmm.fitting  # noqa: F401
            return True
        except ImportError:
            return False

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
        summary = getattr(self.version, "fit_summary", None)
        label = f"version {self.version.id}" if self.version is not None else "in memory"
        fitted = "fitted" if summary else "not fitted to this caseload yet (values as entered)"
        self.heading.setText(f"<b>{self.model.name}</b> — {label}, {fitted}. Rates and probabilities are "
                             "estimates; advisory only.")
        self.summary_view.set_model(self.model, self.version)
        self._fill_sojourn(summary)
        self._fill_hazards(summary)
        self._fill_emissions()
        self._draw_fit_history(summary)
        self.fit_check.model_changed()
        from caseview.modelfile import dump_model

        self.editor.set_text(self.version.json_text if self.version is not None else dump_model(self.model))

    def _fill_sojourn(self, summary) -> None:
        if summary and summary.get("mean_time_in_stage"):
            rows = [(_short(i["name"]), f"{i['estimate']:,.1f}", _interval(i)) for i in summary["mean_time_in_stage"]]
        else:
            q = self.model.generator()
            rows = [(s, f"{-1 / q[r, r]:,.1f}" if q[r, r] < 0 else "no way out", "–")
                    for r, s in enumerate(self.model.stages)]
        _fill(self.sojourn, rows)

    def _fill_hazards(self, summary) -> None:
        if summary and summary.get("hazard_ratios"):
            rows = [(i["name"], f"{i['estimate']:.2f}", _interval(i, "{:.2f}")) for i in summary["hazard_ratios"]]
        else:
            m = self.model
            rows = [(f"{name} on {m.stages[t.source]} → {m.stages[t.target]}", f"{np.exp(beta):.2f}",
                     "–") for t in m.transitions for name, beta in t.effects.items()]
        _fill(self.hazards, rows)

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
        aic, bic, ll = summary.get("aic"), summary.get("bic"), summary.get("log_likelihood")
        numbers = " · ".join(f"{name} {value:,.1f}" for name, value in
                             (("log-likelihood", ll), ("AIC", aic), ("BIC", bic)) if value is not None)
        self.fit_chart_note.setText(f"{numbers} · converged: {'yes' if summary.get('converged') else 'NO'} · "
                                    f"{summary.get('n_cases', '?')} cases")
        history = summary.get("history") or []
        if not history and self._last_fit is not None and self.version is not None \
                and self.version.id == self._last_fit[0]:
            history = self._last_fit[1]
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
        axis.plot([h["iteration"] for h in history], [h["log_likelihood"] for h in history], "-o", ms=3,
                  color="#0072B2")
        axis.set_xlabel("iteration")
        axis.set_ylabel("log-likelihood")
        axis.set_title("Convergence of the fit", fontsize=9, loc="left")
        self.fit_canvas.draw_idle()

    # ------------------------------------------------------------------ fitting
    def start_fit(self) -> None:
        self.fit_warnings.hide()
        loaded = self.window.loaded
        if loaded is None or self.model is None:
            self.fit_message.setText("Open and score a caseload first.")
            return
        from hmm.fitting import fit_model

        model, timelines = self.model, loaded.scores.timelines
        starts, penalised = self.starts.value(), self.penalised.isChecked()
        rng = np.random.default_rng(20261202)
        self.progress.setValue(0)
        self.fit_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.fit_message.setText(f"Fitting to {timelines.n_cases:,} cases ({timelines.n_contacts:,} contacts)…")
        self.jobs.start("fit", lambda callback: fit_model(model, timelines, starts=starts, rng=rng,
                                                          penalised=penalised, callback=callback),
                        on_finished=self._fitted, on_failed=self._fit_failed, on_cancelled=self._fit_cancelled,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)))

    def cancel_fit(self) -> None:
        self.jobs.cancel("fit")
        self.fit_message.setText("Cancelling…")

    def _fit_done(self) -> None:
        self.fit_button.setEnabled(True)
        self.cancel_button.setEnabled(False)

    def _fitted(self, result) -> None:
        self._fit_done()
        self.progress.setValue(100)
        self.fit_warnings.clear()
        self.fit_warnings.addItems([str(w) for w in result.warnings])
        self.fit_warnings.setVisible(bool(result.warnings))
        warnings = (f"{len(result.warnings)} warning{'s' if len(result.warnings) != 1 else ''} below: read them "
                    "before relying on the new version." if result.warnings else "")
        ws = self.window.workspace()
        if ws is not None:
            from caseview.modelfile import dump_model

            version = ws.add_model_version(dump_model(result.model), "fitted in the window", self.window.actor,
                                           fit_summary=result.to_summary(), make_current=True)
            self._last_fit = (version, list(result.history))
            self.fit_message.setText(f"Fit finished (log-likelihood {result.log_likelihood:,.1f}); saved as "
                                     f"version {version} and made current. {warnings}")
            self.refresh()
            self.window.rescore()
        else:
            self.fit_message.setText(f"Fit finished (log-likelihood {result.log_likelihood:,.1f}); not saved "
                                     f"(no workspace). {warnings}")
        self.fit_finished.emit(result)

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
            loaded = self.window.loaded
            return None if loaded is None or self.model is None else (self.model, loaded.scores.timelines)

        self.fit_check = FitCheckArea(inputs)
        self.fit_check.finished.connect(self._fit_checked)
        self.details.addTab(self.fit_check, "Fit check")

    def _fit_checked(self, result) -> None:
        ws = self.window.workspace()
        if ws is not None and self.version is not None:
            ws.audit_append(self.window.actor, "model.fit_check", f"model:{self.version.id}",
                            {"statistic": round(result.statistic, 6), "bootstrap": result.n_bootstrap,
                             "p_value": round(result.p_value, 6) if result.n_bootstrap else None,
                             "refit": result.refit, "cells": len(result.observed), "pairs": result.n_pairs,
                             "from": "window"})

    def shutdown(self) -> None:
        self.fit_check.shutdown()
        self.jobs.shutdown()
