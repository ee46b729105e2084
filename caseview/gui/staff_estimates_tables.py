"""The tables of the staff-estimates dialog: stays and next stages, one per check, covariate effects.

Each table shows rounded numbers but keeps the exact value behind each cell (so a model opened and
accepted unchanged comes back to rounding), reads what the user typed (a share may be typed as
"40%"), hands its part of the estimates to the dialog, and says which cells belong to each
problem path of :mod:`hmm.fitting.staff_estimates` (``cells``) so the dialog can highlight them.
Every table emits ``edited`` after a user edit.
"""

from __future__ import annotations

import textwrap

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QComboBox, QHeaderView, QTableWidget, QTableWidgetItem

from caseview.staff_estimates_file import CheckEstimate, UsualResult, check_probabilities

NOT_CHECKED = "(not checked)"
_VALUE = Qt.UserRole + 1          # exact number behind a rounded cell text
_EDITABLE = Qt.ItemIsEnabled | Qt.ItemIsSelectable | Qt.ItemIsEditable


def show_number(value) -> str:
    return "" if value is None else f"{value:.4g}"


def number_item(value) -> QTableWidgetItem:
    item = QTableWidgetItem(show_number(value))
    item.setData(_VALUE, None if value is None else float(value))
    item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
    return item


def cell_value(item, share: bool = False):
    """The number in a cell: the exact value while the text is unchanged, None when blank, else the
    typed number, or the text itself when it is not a number (the engine then says so). With
    ``share``, "40%" is read as 0.4."""
    if item is None:
        return None
    text = item.text().strip()
    stored = item.data(_VALUE)
    if stored is not None and text == show_number(stored):
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


class _Table(QTableWidget):
    edited = Signal()

    def __init__(self, rows: int, headers: list, row_names: list, accessible_name: str):
        super().__init__(rows, len(headers))
        self.setAccessibleName(accessible_name)
        self.setHorizontalHeaderLabels(headers)
        self.setVerticalHeaderLabels(row_names)
        self.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.horizontalHeader().setDefaultAlignment(Qt.AlignCenter)
        self.verticalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.cells = {}            # problem path -> [(row, column), ...]
        self._quiet = False
        self.itemChanged.connect(self._item_changed)

    def _item_changed(self, item) -> None:
        if not self._quiet:
            self.on_edit(item)
            self.edited.emit()

    def on_edit(self, item) -> None:
        """Hook for tables that keep cells in step."""

    def put(self, r: int, k: int, value=None, editable: bool = True, keep_value: bool = False) -> None:
        """Set a cell's number (unless ``keep_value``) and whether it can be edited, without edit signals."""
        self._quiet = True
        try:
            item = self.item(r, k)
            if not keep_value:
                item.setText(show_number(value))
                item.setData(_VALUE, None if value is None else float(value))
            item.setFlags(_EDITABLE if editable else Qt.ItemIsSelectable)
        finally:
            self._quiet = False


class StageTable(_Table):
    """One row per stage: never leaves, typical stay (days), share of moves to each stage, share at first contact."""

    def __init__(self, stages: tuple, stays: dict, next_stage: dict, initial: dict):
        n = len(stages)
        self.stages = stages
        self.col_never, self.col_stay, self.col_first = 0, 1, 2 + n
        super().__init__(n, ["Never\nleaves", "Typical stay\n(days)"]
                         + [textwrap.fill(f"Share to {s}", 12) for s in stages] + ["Share at\nfirst contact"],
                         list(stages), "Typical stay and next stage for each stage")
        self._quiet = True
        for r, stage in enumerate(stages):
            never = QTableWidgetItem("")
            never.setFlags(Qt.ItemIsEnabled | Qt.ItemIsUserCheckable)
            never.setCheckState(Qt.Checked if stays.get(stage, 0) is None else Qt.Unchecked)
            never.setToolTip("Tick for a stage people never leave (for example a move to residential care)")
            self.setItem(r, self.col_never, never)
            self.setItem(r, self.col_stay, number_item(stays.get(stage)))
            for s, target in enumerate(stages):
                if s == r:
                    item = QTableWidgetItem("—")
                    item.setFlags(Qt.NoItemFlags)
                    item.setTextAlignment(Qt.AlignCenter)
                else:
                    item = number_item((next_stage.get(stage) or {}).get(target))
                self.setItem(r, 2 + s, item)
                self.cells[("next_stage", stage, target)] = [(r, 2 + s)]
            self.setItem(r, self.col_first, number_item(initial.get(stage, 0.0)))
            self.cells[("typical_stay_days", stage)] = [(r, self.col_stay)]
            self.cells[("next_stage", stage)] = [(r, 2 + s) for s in range(n) if s != r]
            self.cells[("initial", stage)] = [(r, self.col_first)]
        self.cells[("initial",)] = [(r, self.col_first) for r in range(n)]
        self._quiet = False
        self.on_edit(None)

    def never_leaves(self, r: int) -> bool:
        return self.item(r, self.col_never).checkState() == Qt.Checked

    def share(self, r: int, s: int):
        """The share of moves from stage ``r`` to ``s`` (None when blank or never left)."""
        return None if self.never_leaves(r) else cell_value(self.item(r, 2 + s), share=True)

    def on_edit(self, item) -> None:
        """Rows of stages people never leave have no typical stay and no next stages to enter."""
        for r in range(len(self.stages)):
            never = self.never_leaves(r)
            for k in [self.col_stay] + [2 + s for s in range(len(self.stages)) if s != r]:
                self.put(r, k, editable=not never, keep_value=True)
            stay = self.item(r, self.col_stay)
            if never and stay.text() != "never":
                self._quiet = True
                stay.setText("never")
                self._quiet = False
            elif not never and stay.text() == "never":
                self._quiet = True
                stay.setText("")
                self._quiet = False

    def estimates(self) -> dict:
        """``typical_stay_days``, ``next_stage`` and ``initial`` as the engine takes them."""
        stays, nexts, initial = {}, {}, {}
        for r, stage in enumerate(self.stages):
            first = cell_value(self.item(r, self.col_first), share=True)
            if first is not None:
                initial[stage] = first
            if self.never_leaves(r):
                stays[stage] = None
                continue
            value = cell_value(self.item(r, self.col_stay))
            stays[stage] = "" if value is None else value
            nexts[stage] = {target: v for s, target in enumerate(self.stages)
                            if s != r and (v := self.share(r, s)) is not None and v != 0}
        return dict(typical_stay_days=stays, next_stage=nexts, initial=initial)


class CheckTable(_Table):
    """One row per stage: usual result, how often wrong, and the share of each result.

    A row is given one of three ways (``modes[r]``): ``"usual"`` (usual result + how often wrong,
    spread evenly; the shares follow), ``"row"`` (every share typed; the usual result and how often
    wrong follow), or ``"none"`` (not checked in that stage: even, fixed).
    """

    def __init__(self, check: CheckEstimate, stages: tuple, index: int):
        self.check, self.stages, self.index = check, stages, index
        k = len(check.categories)
        super().__init__(len(stages), ["Usual result", "How often wrong\n(share 0–1)"]
                         + [f"Share\n{cat}" for cat in check.categories], list(stages),
                         f"Results of the {check.name} check in each stage")
        self.modes = []
        self._quiet = True
        for r, stage in enumerate(stages):
            result = check.results.get(stage)
            combo = QComboBox()
            combo.addItems(list(check.categories) + [NOT_CHECKED])
            combo.setAccessibleName(f"{check.name}: usual result in {stage}")
            if result is None:
                combo.setCurrentText(NOT_CHECKED)
                row, wrong, mode = [1.0 / k] * k, None, "none"
            elif isinstance(result, UsualResult):
                combo.setCurrentText(result.category)
                row, wrong, mode = check_probabilities(check.categories, result), result.wrong_share, "usual"
            else:
                row = [float(v) for v in result]
                combo.setCurrentIndex(max(range(k), key=row.__getitem__))
                wrong, mode = 1.0 - max(row), "row"
            self.setCellWidget(r, 0, combo)
            self.setItem(r, 1, number_item(wrong))
            for j, v in enumerate(row):
                self.setItem(r, 2 + j, number_item(v))
            combo.currentTextChanged.connect(lambda _text, r=r: self._usual_changed(r))
            self.modes.append(mode)
            base = ("checks", index, "results", stage)
            self.cells[base] = [(r, 2 + j) for j in range(k)]
            self.cells[base + ("wrong",)] = self.cells[base + ("usual",)] = [(r, 1)]
            for j in range(k):
                self.cells[base + (j,)] = [(r, 2 + j)]
        self._quiet = False
        self.keep_in_step()

    def usual_result(self, r: int) -> str:
        return self.cellWidget(r, 0).currentText()

    def _usual_changed(self, r: int) -> None:
        if self.usual_result(r) == NOT_CHECKED:
            self.modes[r] = "none"
        else:
            self.modes[r] = "usual"
            if cell_value(self.item(r, 1), share=True) is None:
                self.put(r, 1, 0.1)         # a starting guess the user can change
        self.keep_in_step()
        self.edited.emit()

    def on_edit(self, item) -> None:
        if item.column() == 1:
            self.modes[item.row()] = "usual"
        elif item.column() >= 2:
            self.modes[item.row()] = "row"
        self.keep_in_step()

    def keep_in_step(self) -> None:
        """Keep the two ways of giving a row in step."""
        k = len(self.check.categories)
        for r in range(len(self.stages)):
            mode = self.modes[r]
            if mode == "none":
                for j in range(k):
                    self.put(r, 2 + j, 1.0 / k, editable=False)
                self.put(r, 1, None, editable=False)
                continue
            self.put(r, 1, editable=True, keep_value=True)
            if mode == "usual":
                wrong = cell_value(self.item(r, 1), share=True)
                if isinstance(wrong, float) and 0 < wrong < 1:
                    row = check_probabilities(self.check.categories, UsualResult(self.usual_result(r), wrong))
                    for j in range(k):
                        self.put(r, 2 + j, row[j])
                continue
            row = [cell_value(self.item(r, 2 + j), share=True) for j in range(k)]
            for j in range(k):
                self.put(r, 2 + j, editable=True, keep_value=True)
            if all(isinstance(v, float) for v in row):
                best = max(range(k), key=row.__getitem__)
                combo = self.cellWidget(r, 0)
                combo.blockSignals(True)
                combo.setCurrentIndex(best)
                combo.blockSignals(False)
                self.put(r, 1, 1.0 - row[best])

    def estimate(self) -> CheckEstimate:
        results = {}
        for r, stage in enumerate(self.stages):
            if self.modes[r] == "usual":
                results[stage] = UsualResult(self.usual_result(r), cell_value(self.item(r, 1), share=True))
            elif self.modes[r] == "row":
                values = (cell_value(self.item(r, 2 + j), share=True) for j in range(len(self.check.categories)))
                results[stage] = tuple(0.0 if v is None else v for v in values)
        return CheckEstimate(self.check.name, self.check.categories, results)


class HazardTable(_Table):
    """One row per possible move, one column per covariate: hazard ratios (blank = no effect)."""

    def __init__(self, stages: tuple, covariates: tuple, ratios: dict):
        self.covariates = covariates
        self.pairs = [(a, b) for a in stages for b in stages if a != b]
        super().__init__(len(self.pairs), [f"Hazard ratio\n{c}" for c in covariates],
                         [f"{a} → {b}" for a, b in self.pairs], "Hazard ratio of each covariate on each move")
        self._quiet = True
        for i, pair in enumerate(self.pairs):
            for k, cov in enumerate(covariates):
                self.setItem(i, k, number_item((ratios.get(pair) or {}).get(cov)))
                self.cells[("hazard_ratios", pair, cov)] = [(i, k)]
            self.cells[("hazard_ratios", pair)] = [(i, k) for k in range(len(covariates))]
        self._quiet = False

    def show_moves(self, stage_table: StageTable) -> None:
        """List only moves that happen (a share above 0)."""
        stages = stage_table.stages
        for i, (a, b) in enumerate(self.pairs):
            share = stage_table.share(stages.index(a), stages.index(b))
            self.setRowHidden(i, share is None or share == 0)

    def estimates(self) -> dict:
        ratios = {}
        for i, pair in enumerate(self.pairs):
            if self.isRowHidden(i):
                continue        # a move that does not happen has no covariate effects
            row = {cov: v for k, cov in enumerate(self.covariates) if (v := cell_value(self.item(i, k))) is not None}
            if row:
                ratios[pair] = row
        return ratios
