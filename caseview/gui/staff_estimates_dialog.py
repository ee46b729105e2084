"""Start from staff estimates: build a stage model from what experienced staff expect.

The user fills in tables — how long people typically stay in each stage, where they go next, how
often each check result is wrong — and sees, as they type, which cells are not valid (highlighted,
with a plain message) and the model those numbers make. All checking and arithmetic is done by
:mod:`hmm.fitting.staff_estimates`; this module only moves numbers between tables and that engine.

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

import textwrap

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QHBoxLayout, QHeaderView, QLabel, QLineEdit,
                               QListWidget, QListWidgetItem, QPlainTextEdit, QSplitter, QTableWidget,
                               QTableWidgetItem, QTabWidget, QVBoxLayout, QWidget)

from hmm.fitting.staff_estimates import (CheckEstimate, UsualResult, check_probabilities, model_from_staff_estimates,
                                         staff_estimate_problems, staff_estimates_from_model)

from . import theme

NOT_CHECKED = "(not checked)"
_VALUE = Qt.UserRole + 1          # exact number behind a rounded cell text


def _show(value) -> str:
    return "" if value is None else f"{value:.4g}"


def _number_item(value, editable: bool = True) -> QTableWidgetItem:
    item = QTableWidgetItem(_show(value))
    item.setData(_VALUE, None if value is None else float(value))
    item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
    if not editable:
        item.setFlags(item.flags() & ~Qt.ItemIsEditable)
    return item


def _cell_value(item, share: bool = False):
    """The number in a cell: the exact value while the text is unchanged, None when blank, else the
    parsed number, or the text itself when it is not a number (the engine then says so). With
    ``share``, "40%" is read as 0.4."""
    if item is None:
        return None
    text = item.text().strip()
    stored = item.data(_VALUE)
    if stored is not None and text == _show(stored):
        return stored
    if not text:
        return None
    scale = 1.0
    if share and text.endswith("%"):
        text, scale = text[:-1].strip(), 0.01
    try:
        return float(text.replace(",", ".")) * scale
    except ValueError:
        return item.text().strip()


class StaffEstimatesDialog(QDialog):
    """Build a :class:`~hmm.StageModel` from staff estimates.

    Parameters
    ----------
    model : StageModel
        Structure and starting numbers (see the module docstring).
    parent : QWidget, optional
    estimates : dict, optional
        Keyword arguments of :func:`hmm.fitting.staff_estimates.model_from_staff_estimates` to start from;
        their stages must be the model's.

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
        self.resize(1200, 720)
        self.template = model
        start = estimates or staff_estimates_from_model(model)
        self.stages = tuple(model.stages)
        n = len(self.stages)
        self._filling = False
        self._model = None
        self._problems = []
        self._cells = {}            # problem path prefix -> (table, row, column)

        intro = QLabel("Enter what experienced staff expect, for a person with every covariate at 0. The model "
                       "these numbers make is shown on the right; fit it to your caseload later. "
                       "Cells that need attention are highlighted and listed below.")
        intro.setWordWrap(True)
        self.name_edit = QLineEdit(estimates.get("name", "") if estimates else f"{model.name} (staff estimates)")
        self.name_edit.setAccessibleName("Model name")

        # ---- stages: never leaves, typical stay, shares of next stage, share at first contact
        self.col_never, self.col_stay, self.col_first = 0, 1, 2 + n
        self.stage_table = QTableWidget(n, n + 3)
        self.stage_table.setAccessibleName("Typical stay and next stage for each stage")
        self.stage_table.setHorizontalHeaderLabels(
            ["Never\nleaves", "Typical stay\n(days)"] + [textwrap.fill(f"Share to {s}", 12)
                                                         for s in self.stages] + ["Share at\nfirst contact"])
        self.stage_table.setVerticalHeaderLabels(list(self.stages))
        stays, nexts, initial = start["typical_stay_days"], start["next_stage"], start["initial"]
        for r, stage in enumerate(self.stages):
            never = QTableWidgetItem("")
            never.setFlags(Qt.ItemIsEnabled | Qt.ItemIsUserCheckable)
            never.setCheckState(Qt.Checked if stays.get(stage, 0) is None else Qt.Unchecked)
            never.setToolTip("Tick for a stage people never leave (for example a move to residential care)")
            self.stage_table.setItem(r, self.col_never, never)
            self.stage_table.setItem(r, self.col_stay, _number_item(stays.get(stage)))
            for s, target in enumerate(self.stages):
                if s == r:
                    item = QTableWidgetItem("—")
                    item.setFlags(Qt.NoItemFlags)
                    item.setTextAlignment(Qt.AlignCenter)
                else:
                    item = _number_item((nexts.get(stage) or {}).get(target))
                self.stage_table.setItem(r, 2 + s, item)
            self.stage_table.setItem(r, self.col_first, _number_item(initial.get(stage, 0.0)))
            self._cells[("typical_stay_days", stage)] = [(self.stage_table, r, self.col_stay)]
            self._cells[("next_stage", stage)] = [(self.stage_table, r, 2 + s) for s in range(n) if s != r]
            for s, target in enumerate(self.stages):
                self._cells[("next_stage", stage, target)] = [(self.stage_table, r, 2 + s)]
            self._cells[("initial", stage)] = [(self.stage_table, r, self.col_first)]
        self._cells[("initial",)] = [(self.stage_table, r, self.col_first) for r in range(n)]
        self._tidy(self.stage_table)

        self.tabs = QTabWidget()
        self.tabs.addTab(self._page(self.stage_table, "Typical stay: the average number of days people stay in the "
                                    "stage. Share to …: out of all moves out of the stage, the share going to "
                                    "that stage (0 to 1 or a percentage, adding up to 1; blank = never). Share at first "
                                    "contact: the share of new cases in each stage (adding up to 1)."),
                         "Stays and next stages")

        # ---- one table per check: usual result, how often wrong, resulting probability of each result
        self.check_tables, self.check_modes = [], []
        for c, check in enumerate(start.get("checks", ())):
            table = QTableWidget(n, 2 + len(check.categories))
            table.setAccessibleName(f"Results of the {check.name} check in each stage")
            table.setHorizontalHeaderLabels(["Usual result", "How often wrong\n(share 0–1)"]
                                            + [f"Share\n{cat}" for cat in check.categories])
            table.setVerticalHeaderLabels(list(self.stages))
            modes = []
            for r, stage in enumerate(self.stages):
                result = check.results.get(stage)
                combo = QComboBox()
                combo.addItems(list(check.categories) + [NOT_CHECKED])
                combo.setAccessibleName(f"{check.name}: usual result in {stage}")
                if result is None:
                    combo.setCurrentText(NOT_CHECKED)
                    row, wrong, mode = [1.0 / len(check.categories)] * len(check.categories), None, "none"
                elif isinstance(result, UsualResult):
                    combo.setCurrentText(result.category)
                    row, wrong, mode = check_probabilities(check.categories, result), result.wrong_share, "usual"
                else:
                    row = [float(v) for v in result]
                    combo.setCurrentIndex(max(range(len(row)), key=row.__getitem__))
                    wrong, mode = 1.0 - max(row), "row"
                table.setCellWidget(r, 0, combo)
                table.setItem(r, 1, _number_item(wrong))
                for k, v in enumerate(row):
                    table.setItem(r, 2 + k, _number_item(v))
                combo.currentTextChanged.connect(lambda _text, c=c, r=r: self._usual_changed(c, r))
                modes.append(mode)
                base = ("checks", c, "results", stage)
                self._cells[base] = [(table, r, 2 + k) for k in range(len(check.categories))]
                self._cells[base + ("wrong",)] = [(table, r, 1)]
                self._cells[base + ("usual",)] = [(table, r, 1)]
                for k in range(len(check.categories)):
                    self._cells[base + (k,)] = [(table, r, 2 + k)]
            table.itemChanged.connect(lambda item, c=c: self._check_item_changed(c, item))
            self._tidy(table)
            self.check_tables.append((check, table))
            self.check_modes.append(modes)
            self._set_check_row_state(c)
            self.tabs.addTab(self._page(table, f"For each stage: the result the {check.name} check usually gives "
                                        "and how often it gives another one (spread evenly over the other "
                                        "results), or type the share of each result directly. "
                                        f"'{NOT_CHECKED}' is for stages where nobody is checked."),
                             f"Check: {check.name}")

        # ---- hazard ratios: one row per possible move, one column per covariate
        self.covariates = tuple(start.get("covariates", ()))
        self.pairs = [(a, b) for a in self.stages for b in self.stages if a != b]
        self.hazard_table = None
        if self.covariates:
            ratios = start.get("hazard_ratios") or {}
            self.hazard_table = QTableWidget(len(self.pairs), len(self.covariates))
            self.hazard_table.setAccessibleName("Hazard ratio of each covariate on each move")
            self.hazard_table.setHorizontalHeaderLabels([f"Hazard ratio\n{c}" for c in self.covariates])
            self.hazard_table.setVerticalHeaderLabels([f"{a} → {b}" for a, b in self.pairs])
            for i, pair in enumerate(self.pairs):
                for k, cov in enumerate(self.covariates):
                    self.hazard_table.setItem(i, k, _number_item((ratios.get(pair) or {}).get(cov)))
                    self._cells[("hazard_ratios", pair, cov)] = [(self.hazard_table, i, k)]
                self._cells[("hazard_ratios", pair)] = [(self.hazard_table, i, k) for k in range(len(self.covariates))]
            self._tidy(self.hazard_table)
            self.tabs.addTab(self._page(self.hazard_table, "How much each covariate multiplies the rate of a move: "
                                        "2 = twice as fast, 0.5 = half as fast, blank = no effect. Only moves with a "
                                        "share above 0 are listed."), "Covariate effects")

        # ---- preview, problems, buttons
        self.preview = QPlainTextEdit()
        self.preview.setReadOnly(True)
        self.preview.setAccessibleName("The model these estimates make")
        mono = QFont("monospace")
        mono.setStyleHint(QFont.Monospace)
        self.preview.setFont(mono)
        self.preview.setLineWrapMode(QPlainTextEdit.NoWrap)
        self.problem_list = QListWidget()
        self.problem_list.setAccessibleName("Cells that need attention")
        self.problem_list.itemActivated.connect(self._go_to_problem)
        self.problem_list.itemClicked.connect(self._go_to_problem)
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
        split.setSizes([830, 370])
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
        self.stage_table.itemChanged.connect(self._stage_item_changed)
        if self.hazard_table is not None:
            self.hazard_table.itemChanged.connect(lambda _item: self._timer.start())
        self.name_edit.textChanged.connect(lambda _text: self._timer.start())
        self._set_stage_row_states()
        self.refresh()

    # ------------------------------------------------------------ public API
    def estimates(self) -> dict:
        """The numbers in the tables as keyword arguments of ``model_from_staff_estimates`` (may be invalid)."""
        t = self.stage_table
        stays, nexts, initial = {}, {}, {}
        for r, stage in enumerate(self.stages):
            if t.item(r, self.col_never).checkState() == Qt.Checked:
                stays[stage] = None
                continue
            value = _cell_value(t.item(r, self.col_stay))
            stays[stage] = "" if value is None else value
            shares = {}
            for s, target in enumerate(self.stages):
                if s != r:
                    share = _cell_value(t.item(r, 2 + s), share=True)
                    if share is not None and share != 0:
                        shares[target] = share
            nexts[stage] = shares
        for r, stage in enumerate(self.stages):
            value = _cell_value(t.item(r, self.col_first), share=True)
            if value is not None:
                initial[stage] = value
        checks = []
        for c, (check, table) in enumerate(self.check_tables):
            results = {}
            for r, stage in enumerate(self.stages):
                mode = self.check_modes[c][r]
                if mode == "none":
                    continue
                if mode == "usual":
                    wrong = _cell_value(table.item(r, 1), share=True)
                    results[stage] = UsualResult(table.cellWidget(r, 0).currentText(), wrong)
                else:
                    results[stage] = tuple(0.0 if v is None else v for v in
                                           (_cell_value(table.item(r, 2 + k), share=True)
                                            for k in range(len(check.categories))))
            checks.append(CheckEstimate(check.name, check.categories, results))
        ratios = {}
        if self.hazard_table is not None:
            for i, pair in enumerate(self.pairs):
                if self.hazard_table.isRowHidden(i):
                    continue        # a move that does not happen has no covariate effects
                row = {cov: v for k, cov in enumerate(self.covariates)
                       if (v := _cell_value(self.hazard_table.item(i, k))) is not None}
                if row:
                    ratios[pair] = row
        m = self.template
        return dict(stages=self.stages, typical_stay_days=stays, next_stage=nexts, initial=initial,
                    checks=tuple(checks), covariates=self.covariates, hazard_ratios=ratios,
                    follow_up_stages=tuple(m.follow_up_stages), exact_entry_stages=tuple(m.exact_entry_stages),
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
        self._set_stage_row_states()
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
        ok = self.buttons.button(QDialogButtonBox.Ok)
        ok.setEnabled(self._model is not None)
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

    def _cells_for(self, path) -> list:
        path = tuple(path)
        while path and path not in self._cells:
            path = path[:-1]
        return self._cells.get(path, [])

    def _highlight(self) -> None:
        bad = QBrush(QColor(theme.colour("risk_high")).lighter(185))
        tables = [self.stage_table] + [t for _, t in self.check_tables] + ([self.hazard_table] if self.hazard_table
                                                                           else [])
        self._filling = True
        try:
            for table in tables:
                table.blockSignals(True)
                for r in range(table.rowCount()):
                    for k in range(table.columnCount()):
                        item = table.item(r, k)
                        if item is not None and item.data(Qt.BackgroundRole) is not None:
                            item.setData(Qt.BackgroundRole, None)
                            item.setToolTip("")
            for problem in self._problems:
                for table, r, k in self._cells_for(problem.path):
                    item = table.item(r, k)
                    item.setBackground(bad)
                    item.setToolTip(problem.message)
        finally:
            for table in tables:
                table.blockSignals(False)
            self._filling = False

    def _go_to_problem(self, item) -> None:
        cells = self._cells_for(item.data(Qt.UserRole))
        if cells:
            table, r, k = cells[0]
            for i in range(self.tabs.count()):
                if self.tabs.widget(i).isAncestorOf(table):
                    self.tabs.setCurrentIndex(i)
            table.setCurrentCell(r, k)
            table.setFocus()

    # ------------------------------------------------------------ editing
    def _stage_item_changed(self, item) -> None:
        if not self._filling:
            self._timer.start()

    def _set_stage_row_states(self) -> None:
        """Rows of stages people never leave: no typical stay and no next stages to enter."""
        t = self.stage_table
        self._filling = True
        t.blockSignals(True)
        try:
            for r in range(len(self.stages)):
                never = t.item(r, self.col_never).checkState() == Qt.Checked
                for k in [self.col_stay] + [2 + s for s in range(len(self.stages)) if s != r]:
                    item = t.item(r, k)
                    flags = Qt.ItemIsEnabled | Qt.ItemIsSelectable | Qt.ItemIsEditable
                    item.setFlags(Qt.NoItemFlags if never else flags)
                    if never and k == self.col_stay:
                        item.setText("never")
                    elif not never and item.text() == "never":
                        item.setText("")
            if self.hazard_table is not None:
                for i, (a, b) in enumerate(self.pairs):
                    r, s = self.stages.index(a), self.stages.index(b)
                    share = None if t.item(r, self.col_never).checkState() == Qt.Checked else \
                        _cell_value(t.item(r, 2 + s), share=True)
                    self.hazard_table.setRowHidden(i, share is None or share == 0)
        finally:
            t.blockSignals(False)
            self._filling = False

    def _usual_changed(self, c: int, r: int) -> None:
        check, table = self.check_tables[c]
        combo = table.cellWidget(r, 0)
        if combo.currentText() == NOT_CHECKED:
            self.check_modes[c][r] = "none"
        else:
            self.check_modes[c][r] = "usual"
            if _cell_value(table.item(r, 1), share=True) is None:
                self._fill(table, r, 1, 0.1)        # a starting guess the user can change
        self._set_check_row_state(c)
        self._timer.start()

    def _check_item_changed(self, c: int, item) -> None:
        if self._filling:
            return
        if item.column() == 1:
            self.check_modes[c][item.row()] = "usual"
        elif item.column() >= 2:
            self.check_modes[c][item.row()] = "row"
        self._set_check_row_state(c)
        self._timer.start()

    def _set_check_row_state(self, c: int) -> None:
        """Keep the two ways of giving a row in step: usual result + how often wrong, or every share."""
        check, table = self.check_tables[c]
        k = len(check.categories)
        for r in range(len(self.stages)):
            mode = self.check_modes[c][r]
            combo = table.cellWidget(r, 0)
            if mode == "none":
                for j in range(k):
                    self._fill(table, r, 2 + j, 1.0 / k, editable=False)
                self._fill(table, r, 1, None, editable=False)
                continue
            self._fill(table, r, 1, None, editable=True, keep=True)
            if mode == "usual":
                wrong = _cell_value(table.item(r, 1), share=True)
                if isinstance(wrong, float) and 0 < wrong < 1:
                    row = check_probabilities(check.categories, UsualResult(combo.currentText(), wrong))
                    for j in range(k):
                        self._fill(table, r, 2 + j, row[j])
            else:
                row = [_cell_value(table.item(r, 2 + j), share=True) for j in range(k)]
                for j in range(k):
                    self._fill(table, r, 2 + j, row[j], keep=True)
                if all(isinstance(v, float) for v in row):
                    best = max(range(k), key=row.__getitem__)
                    combo.blockSignals(True)
                    combo.setCurrentIndex(best)
                    combo.blockSignals(False)
                    self._fill(table, r, 1, 1.0 - row[best])

    def _fill(self, table, r, k, value, editable=True, keep=False) -> None:
        """Set a cell without triggering the edit handlers (``keep``: only its editable state)."""
        self._filling = True
        table.blockSignals(True)
        try:
            item = table.item(r, k)
            if not keep:
                item.setText(_show(value))
                item.setData(_VALUE, None if not isinstance(value, float) else value)
            flags = Qt.ItemIsEnabled | Qt.ItemIsSelectable | (Qt.ItemIsEditable if editable else Qt.NoItemFlags)
            item.setFlags(flags if editable else Qt.ItemIsSelectable)
        finally:
            table.blockSignals(False)
            self._filling = False

    # ------------------------------------------------------------ layout helpers
    @staticmethod
    def _tidy(table: QTableWidget) -> None:
        header = table.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeToContents)
        header.setDefaultAlignment(Qt.AlignCenter)
        table.verticalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)

    @staticmethod
    def _page(table: QTableWidget, help_text: str) -> QWidget:
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
            note = "  not checked" if r in channel.fixed_stages else ""
            lines.append(f"  {stage:<{width}}  " + " ".join(f"{v:7.3f}" for v in channel.probabilities[r]) + note)
    return "\n".join(lines)
