"""Start from staff estimates: build a stage model from what experienced staff expect.

The user fills in tables — how long people typically stay in each stage, where they go next, how
often each check result is wrong — and sees, as they type, which cells are not valid (highlighted,
with a plain message) and the model those numbers make. All checking and arithmetic is done by
:mod:`hmm.fitting.staff_estimates`; the tables (:mod:`.staff_estimates_tables`) only move numbers
between cells and that engine.

Wiring (for the model panel)::

    dialog = StaffEstimatesDialog(current_model, parent=self)
    if dialog.exec() == QDialog.Accepted:
        self.editor.set_text(dialog.model_json())     # the user then saves it as a new version

The structure (stages, checks and their results, covariates, follow-up and exact-entry stages)
comes from ``model``; the starting numbers are that model's own mean stays, next-stage shares and
check probabilities, unless ``estimates`` (for example from
:func:`caseview.staff_estimates_file.load_staff_estimates`) is given.
"""

from __future__ import annotations

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (QDialog, QDialogButtonBox, QHBoxLayout, QLabel, QLineEdit, QListWidget,
                               QListWidgetItem, QPlainTextEdit, QSplitter, QTabWidget, QVBoxLayout, QWidget)

from caseview.staff_estimates_file import model_from_staff_estimates, staff_estimate_problems, staff_estimates_from_model

from . import theme
from .staff_estimates_tables import NOT_CHECKED, CheckTable, HazardTable, StageTable

__all__ = ["StaffEstimatesDialog", "describe", "NOT_CHECKED"]


class StaffEstimatesDialog(QDialog):
    """Build a :class:`~hmm.StageModel` from staff estimates.

    Parameters
    ----------
    model : StageModel
        Structure and starting numbers (see the module docstring).
    parent : QWidget, optional
    estimates : dict, optional
        Keyword arguments of :func:`hmm.fitting.staff_estimates.model_from_staff_estimates` to start from;
        their stages must be the model's (ValueError otherwise). Everything else (checks, covariates,
        follow-up and exact-entry stages) then comes from ``estimates``.

    Signals
    -------
    model_ready(str)
        The model file JSON, emitted when the user presses OK (only possible when valid).

    After ``exec() == QDialog.Accepted``: :meth:`model`, :meth:`model_json`, :meth:`estimates`.
    """

    model_ready = Signal(str)

    def __init__(self, model, parent=None, estimates: dict | None = None):
        super().__init__(parent)
        self.setWindowTitle("Start from staff estimates")
        self.resize(1280, 720)
        self.template = model
        start = estimates or staff_estimates_from_model(model)
        self.stages = tuple(model.stages)
        if tuple(start["stages"]) != self.stages:
            raise ValueError(f"the estimates are for stages {', '.join(start['stages'])}, but the model has "
                             f"{', '.join(self.stages)}")
        self._model = None
        self._problems = []

        intro = QLabel("Enter what experienced staff expect, for a person with every covariate at 0. The model "
                       "these numbers make is shown on the right; fit it to your caseload later. "
                       "Cells that need attention are highlighted and listed below.")
        intro.setWordWrap(True)
        self.name_edit = QLineEdit(estimates.get("name", "") if estimates else f"{model.name} (staff estimates)")
        self.name_edit.setAccessibleName("Model name")

        self.tabs = QTabWidget()
        self.stage_table = StageTable(self.stages, start["typical_stay_days"], start["next_stage"], start["initial"])
        self.tabs.addTab(_page(self.stage_table, "Typical stay: the average number of days people stay in the "
                               "stage. Share to …: out of all moves out of the stage, the share going to that "
                               "stage (0 to 1 or a percentage, adding up to 1; blank = never). Share at first "
                               "contact: the share of new cases in each stage (adding up to 1)."),
                         "Stays and next stages")
        self.check_tables = []
        for c, check in enumerate(start.get("checks", ())):
            table = CheckTable(check, self.stages, c)
            self.check_tables.append(table)
            self.tabs.addTab(_page(table, f"For each stage: the result the {check.name} check usually gives and "
                                   "how often it gives another one (spread evenly over the other results), or "
                                   f"type the share of each result directly. '{NOT_CHECKED}' is for stages where "
                                   "nobody is checked."), f"Check: {check.name}")
        self.covariates = tuple(start.get("covariates", ()))
        self.follow_up_stages = tuple(start.get("follow_up_stages", model.follow_up_stages))
        self.exact_entry_stages = tuple(start.get("exact_entry_stages", model.exact_entry_stages))
        self.hazard_table = None
        if self.covariates:
            self.hazard_table = HazardTable(self.stages, self.covariates, start.get("hazard_ratios") or {})
            self.tabs.addTab(_page(self.hazard_table, "How much each covariate multiplies the rate of a move: 2 = "
                                   "twice as fast, 0.5 = half as fast, blank = no effect. Only moves with a share "
                                   "above 0 are listed."), "Covariate effects")

        self.preview = QPlainTextEdit()
        self.preview.setReadOnly(True)
        self.preview.setAccessibleName("The model these estimates make")
        mono = QFont("monospace")
        mono.setStyleHint(QFont.Monospace)
        self.preview.setFont(mono)
        self.preview.setLineWrapMode(QPlainTextEdit.NoWrap)
        self.problem_list = QListWidget()
        self.problem_list.setAccessibleName("Cells that need attention")
        self.problem_list.itemActivated.connect(self.go_to_problem)
        self.problem_list.itemClicked.connect(self.go_to_problem)
        self.problem_list.setMaximumHeight(120)
        self.message = QLabel("")
        self.message.setWordWrap(True)
        self.message.setAccessibleName("Result of checking the estimates")
        self.buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        self.buttons.button(QDialogButtonBox.Ok).setText("Use this model")
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)

        right = QWidget()
        right_layout = QVBoxLayout(right)
        right_layout.setContentsMargins(0, 0, 0, 0)
        right_layout.addWidget(QLabel("The model these numbers make"))
        right_layout.addWidget(self.preview, 1)
        split = QSplitter()
        split.addWidget(self.tabs)
        split.addWidget(right)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 1)
        split.setSizes([800, 480])
        name_row = QHBoxLayout()
        name_row.addWidget(QLabel("Model name"))
        name_row.addWidget(self.name_edit, 1)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(name_row)
        layout.addWidget(split, 1)
        layout.addWidget(self.message)
        layout.addWidget(self.problem_list)
        layout.addWidget(self.buttons)

        self._timer = QTimer(self, singleShot=True, interval=150, timeout=self.refresh)
        for table in self._tables():
            table.edited.connect(self._timer.start)
        self.name_edit.textChanged.connect(lambda _text: self._timer.start())
        self.refresh()

    # ------------------------------------------------------------ public API
    def estimates(self) -> dict:
        """The numbers in the tables as keyword arguments of ``model_from_staff_estimates`` (may be invalid)."""
        return dict(stages=self.stages, **self.stage_table.estimates(),
                    checks=tuple(t.estimate() for t in self.check_tables), covariates=self.covariates,
                    hazard_ratios=self.hazard_table.estimates() if self.hazard_table else {},
                    follow_up_stages=self.follow_up_stages, exact_entry_stages=self.exact_entry_stages,
                    name=self.name_edit.text().strip() or "model from staff estimates")

    def problems(self) -> list:
        """What is wrong with the current numbers (list of :class:`hmm.fitting.staff_estimates.Problem`)."""
        return list(self._problems)

    def model(self):
        """The :class:`~hmm.StageModel` the numbers make, or None while any cell is not valid."""
        return self._model

    def model_json(self) -> str:
        """The model in the model-file format (empty text while not valid)."""
        from caseview.modelfile import dump_model

        if self._model is None:
            return ""
        return dump_model(self._model, extra={"note": "built from staff estimates in the window"})

    def accept(self) -> None:
        self.refresh()
        if self._model is None:
            return
        self.model_ready.emit(self.model_json())
        super().accept()

    # ------------------------------------------------------------ checking
    def refresh(self) -> None:
        """Check the numbers now: highlight problem cells, list the problems, update the preview."""
        self._timer.stop()
        if self.hazard_table is not None:
            self.hazard_table.show_moves(self.stage_table)
        estimates = self.estimates()
        self._problems = staff_estimate_problems(**estimates)
        self._model = None if self._problems else model_from_staff_estimates(**estimates)
        self._highlight()
        self.problem_list.clear()
        for problem in self._problems:
            item = QListWidgetItem(f"⚠ {problem.message}")
            item.setData(Qt.UserRole, problem.path)
            self.problem_list.addItem(item)
        self.problem_list.setVisible(bool(self._problems))
        self.buttons.button(QDialogButtonBox.Ok).setEnabled(self._model is not None)
        if self._model is None:
            count = len(self._problems)
            self.message.setText(f"<span style='color:{theme.colour('risk_high')}'>✗</span> "
                                 f"{count} problem{'s' if count != 1 else ''} to fix before the model can be used "
                                 "(click a line below to go to its cell).")
            self.preview.setPlainText("Fix the highlighted cells to see the model.")
        else:
            self.message.setText(f"<span style='color:{theme.colour('ok')}'>✓</span> These estimates make a valid "
                                 f"model: {self._model.n_stages} stages, {len(self._model.transitions)} moves, "
                                 f"{len(self._model.channels)} checks.")
            self.preview.setPlainText(describe(self._model))

    def _tables(self) -> list:
        return [self.stage_table] + self.check_tables + ([self.hazard_table] if self.hazard_table else [])

    def cells_for(self, path) -> list:
        """``(table, row, column)`` of the cells a problem path refers to (its longest known prefix)."""
        path = tuple(path)
        while path:
            found = [(table, r, k) for table in self._tables() for r, k in table.cells.get(path, [])]
            if found:
                return found
            path = path[:-1]
        return []

    def _highlight(self) -> None:
        bad = QBrush(QColor(theme.colour("risk_high")).lighter(185))
        tables = self._tables()
        for table in tables:
            table.blockSignals(True)
        try:
            for table in tables:
                for r in range(table.rowCount()):
                    for k in range(table.columnCount()):
                        item = table.item(r, k)
                        if item is not None and item.data(Qt.BackgroundRole) is not None:
                            item.setData(Qt.BackgroundRole, None)
                            item.setToolTip("")
            for problem in self._problems:
                for table, r, k in self.cells_for(problem.path):
                    table.item(r, k).setBackground(bad)
                    table.item(r, k).setToolTip(problem.message)
        finally:
            for table in tables:
                table.blockSignals(False)

    def go_to_problem(self, item) -> None:
        """Show the tab and select the cell of a problem in the list."""
        cells = self.cells_for(item.data(Qt.UserRole))
        if cells:
            table, r, k = cells[0]
            for i in range(self.tabs.count()):
                if self.tabs.widget(i).isAncestorOf(table):
                    self.tabs.setCurrentIndex(i)
            table.setCurrentCell(r, k)
            table.setFocus()


def _page(table, help_text: str) -> QWidget:
    page = QWidget()
    layout = QVBoxLayout(page)
    note = QLabel(help_text)
    note.setWordWrap(True)
    layout.addWidget(note)
    layout.addWidget(table, 1)
    return page


def describe(model) -> str:
    """Plain text: each stage's mean stay and rates out, and each check's probabilities (covariates at 0)."""
    implied = staff_estimates_from_model(model)
    rates = model.baseline_rate_matrix()
    width = max(len(s) for s in model.stages)
    lines = ["Mean time in each stage; rate of each move"]
    for r, stage in enumerate(model.stages):
        stay = implied["typical_stay_days"][stage]
        if stay is None:
            lines.append(f"{stage}: never leaves")
            continue
        lines.append(f"{stage}: {stay:.1f} days on average")
        for s in range(model.n_stages):
            if rates[r, s] > 0:
                share = implied["next_stage"][stage][model.stages[s]]
                lines.append(f"  → {model.stages[s]:<{width}}  {rates[r, s]:.5f}/day  {share:4.0%}")
    for channel in model.channels:
        lines.append("")
        lines.append(f"Check '{channel.name}': share of each result")
        lines.append(f"  {'':<{width}}  " + " ".join(f"{c[:7]:>7}" for c in channel.categories))
        for r, stage in enumerate(model.stages):
            if r in channel.fixed_stages:
                lines.append(f"  {stage:<{width}}  not checked (fixed)")
            else:
                lines.append(f"  {stage:<{width}}  " + " ".join(f"{v:7.3f}" for v in channel.probabilities[r]))
    return "\n".join(lines)
