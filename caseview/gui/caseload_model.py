"""The caseload table: a Qt item model over numpy arrays (no per-row Python objects).

Sorting is ``numpy.argsort`` on a precomputed integer or float key per column, wrapped in
``layoutAboutToBeChanged`` / ``layoutChanged``; filters (coordinator, stage, flagged, review
status, case-ID search) are boolean masks. ``data()`` is O(1): it indexes the arrays through the
current row order and formats one value.
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right

import numpy as np
from PySide6.QtCore import QAbstractTableModel, QModelIndex, Qt

from caseview.followup.wording import due_words
from caseview.dates import from_day

COLUMNS = ("Case", "Coordinator", "Last contact", "Days since", "Likely stage now",
           "Follow-up now", "Reach follow-up", "Next contact due", "Flags", "Review")
CASE, COORDINATOR, LAST_CONTACT, DAYS_SINCE, STAGE, P_NOW, P_REACH, NEXT_DUE, FLAGS, REVIEW = range(10)
PROBABILITY_COLUMNS = (P_NOW, P_REACH)
#: Role carrying the raw probability (0..1) for the bar delegate.
PROBABILITY_ROLE = Qt.UserRole + 1
#: Role carrying the row index into the scores arrays.
CASE_ROW_ROLE = Qt.UserRole + 2
REVIEW_STATUSES = ("", "new", "acknowledged", "actioned", "dismissed")

# Roles as plain ints, looked up once: data() runs for ~7 roles of every visible cell on each
# repaint, and reading Qt enum attributes there costs more than the answer.
_DISPLAY, _ACCESSIBLE_TEXT, _TOOLTIP, _ALIGNMENT = (int(r.value) for r in (
    Qt.DisplayRole, Qt.AccessibleTextRole, Qt.ToolTipRole, Qt.TextAlignmentRole))
_PROBABILITY, _CASE_ROW = int(PROBABILITY_ROLE), int(CASE_ROW_ROLE)
_HANDLED_ROLES = frozenset({_DISPLAY, _ACCESSIBLE_TEXT, _TOOLTIP, _ALIGNMENT, _PROBABILITY, _CASE_ROW})
_RIGHT = int((Qt.AlignRight | Qt.AlignVCenter).value)
_LEFT = int((Qt.AlignLeft | Qt.AlignVCenter).value)


def _ranks(values: np.ndarray) -> np.ndarray:
    """Integer rank of each text value (equal texts share a rank), shape (n,)."""
    if values.size == 0:
        return np.zeros(0, dtype=np.int64)
    if values.dtype == object and values.size > 1 and bool(np.all(values[1:] > values[:-1])):
        return np.arange(values.size, dtype=np.int64)  # distinct and already in order (case IDs usually are)
    texts = list(map(str, values.tolist()))
    distinct = set(texts)
    if len(distinct) <= 4096:  # few distinct texts (coordinators, flags, review): a dictionary is faster
        code = {text: rank for rank, text in enumerate(sorted(distinct))}
        return np.fromiter(map(code.__getitem__, texts), dtype=np.int64, count=len(texts))
    _, inverse = np.unique(values.astype(str), return_inverse=True)
    return inverse.astype(np.int64)


class CaseloadTableModel(QAbstractTableModel):
    """Rows = cases of a :class:`~caseview.gui.data_source.LoadedCaseload`, in the current order."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.scores = None
        self.assessment = None
        self._n = 0
        self.order = np.zeros(0, dtype=np.int64)   # scores rows in display order
        self._mask = np.zeros(0, dtype=bool)
        self._sort_column = -1                      # -1 = priority
        self._sort_descending = True
        self._filters = {"coordinator": "", "stage": -1, "flagged_only": False, "review": None, "search": ""}
        self.horizon_days = 90.0

    # ------------------------------------------------------------------ loading
    def set_caseload(self, loaded) -> None:
        """Show a new :class:`LoadedCaseload` (keeps the current filters and sort)."""
        self.beginResetModel()
        scores = loaded.scores
        self.scores = scores
        self.assessment = loaded.assessment
        n = self._n = scores.n_cases
        self.horizon_days = scores.horizon_days
        self.case_ids = np.asarray(scores.case_ids, dtype=object)
        from caseview.timeline_io.case_ids import search_key

        self._case_id_keys = np.array([search_key(c) for c in self.case_ids.tolist()] + [""])[:-1] if n \
            else np.zeros(0, dtype=str)
        # copies: update_case compares a row's old text with the new one written in place by a one-case rescore
        self.coordinators = np.array(scores.coordinators, dtype=object)
        self.stage_names = np.asarray(scores.model.stages, dtype=object)
        self.most_likely = np.asarray(scores.most_likely_stage, dtype=np.int64)
        self.most_likely_p = scores.p_now[np.arange(n), self.most_likely] if n else np.zeros(0)
        a = self.assessment
        self.flag_names = np.array(a.flags, dtype=object)
        self.is_flagged = np.asarray(a.is_flagged, dtype=bool)
        self.reason_text = np.asarray(a.reason_text, dtype=object)
        self.next_due = np.asarray(a.next_contact_due_day, dtype=np.int64)
        self.review = np.array(a.review_status, dtype=object)
        self.review_note = np.array(a.review_note, dtype=object)
        self.priority = np.asarray(a.priority, dtype=float)
        due_key = np.where(self.next_due < 0, np.iinfo(np.int64).max, self.next_due)
        self._keys = {
            CASE: _ranks(self.case_ids), COORDINATOR: _ranks(self.coordinators),
            LAST_CONTACT: scores.last_contact_day, DAYS_SINCE: scores.days_since_contact,
            STAGE: self.most_likely * 2.0 + self.most_likely_p, P_NOW: scores.p_follow_up_now,
            P_REACH: scores.p_reach_follow_up, NEXT_DUE: due_key, FLAGS: _ranks(self.flag_names),
            REVIEW: _ranks(self.review), -1: self.priority,
        }
        self._mask = self._compute_mask()
        self.order = self._sorted(np.flatnonzero(self._mask))
        self.endResetModel()

    def update_case(self, loaded, row: int) -> bool:
        """Show case ``row`` rescored in ``loaded`` (same cases as shown; only that row changed).

        Updates the row's cached values and keys, then moves that one row to its place in the
        current sort (``beginMoveRows``, found by bisection: no sort of the whole table; the
        selection and scroll position stay). Returns False when the filters would now hide or
        reveal the row; then call :meth:`set_caseload`.
        """
        scores, a = loaded.scores, loaded.assessment
        if self.scores is None or scores.n_cases != self._n:
            return False
        self.scores, self.assessment = scores, a
        before = {COORDINATOR: self.coordinators[row], FLAGS: self.flag_names[row], REVIEW: self.review[row]}
        self.case_ids[row] = scores.case_ids[row]
        self.coordinators[row] = scores.coordinators[row]
        self.most_likely[row] = int(scores.most_likely_stage[row])
        self.most_likely_p[row] = scores.p_now[row, self.most_likely[row]]
        for name, source in (("flag_names", a.flags), ("is_flagged", a.is_flagged),
                             ("reason_text", a.reason_text), ("next_due", a.next_contact_due_day),
                             ("review", a.review_status), ("priority", a.priority)):
            getattr(self, name)[row] = source[row]
        keys = self._keys
        keys[LAST_CONTACT], keys[DAYS_SINCE] = scores.last_contact_day, scores.days_since_contact
        keys[P_NOW], keys[P_REACH], keys[-1] = scores.p_follow_up_now, scores.p_reach_follow_up, self.priority
        keys[STAGE][row] = self.most_likely[row] * 2.0 + self.most_likely_p[row]
        keys[NEXT_DUE][row] = np.iinfo(np.int64).max if self.next_due[row] < 0 else self.next_due[row]
        for column, values in ((COORDINATOR, self.coordinators), (FLAGS, self.flag_names), (REVIEW, self.review)):
            if values[row] == before[column]:
                continue
            same = np.flatnonzero(values == values[row])
            same = same[same != row]
            if same.size:  # the text is shown elsewhere: the row takes its rank
                keys[column] = np.array(keys[column], dtype=np.int64)
                keys[column][row] = keys[column][same[0]]
            else:
                keys[column] = _ranks(values)
        shown = bool(self._compute_mask(np.array([row]))[0])
        if shown != bool(self._mask[row]):
            return False
        if not shown:
            return True
        old = int(np.flatnonzero(self.order == row)[0])
        rest = np.delete(self.order, old)
        new = self._place(rest, row)
        if new != old:  # one row moves (Qt's destination counts the rows before the move); selection follows
            self.beginMoveRows(QModelIndex(), old, old, QModelIndex(), new if new < old else new + 1)
            self.order = np.insert(rest, new, row)
            self.endMoveRows()
        self.dataChanged.emit(self.index(new, 0), self.index(new, len(COLUMNS) - 1))
        return True

    def _sort_value(self, row) -> tuple:
        """Sort key of scores row ``row`` as :meth:`_sorted` orders it (missing values last)."""
        value = self._keys[self._sort_column][row]
        value = -float(value) if self._sort_descending else value
        missing = value != value
        return (bool(missing), 0 if missing else value)

    def _place(self, rest: np.ndarray, row: int) -> int:
        """Position of ``row`` in ``rest`` (the shown order without it): after the rows with a smaller
        key, and among equal keys by row number, as sorting the shown rows again would put it
        (bisection: a few keys instead of sorting 100,000)."""
        key = self._sort_value(row)
        low = bisect_left(rest, key, key=self._sort_value)
        high = bisect_right(rest, key, lo=low, key=self._sort_value)
        return bisect_left(rest, row, low, high)

    def clear(self) -> None:
        self.beginResetModel()
        self.scores = self.assessment = None
        self._n = 0
        self.order = np.zeros(0, dtype=np.int64)
        self.endResetModel()

    # --------------------------------------------------------------- Qt model API
    def rowCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else int(self.order.size)

    def columnCount(self, parent=QModelIndex()) -> int:
        return 0 if parent.isValid() else len(COLUMNS)

    def headerData(self, section, orientation, role=Qt.DisplayRole):
        if orientation == Qt.Horizontal:
            if role == Qt.DisplayRole:
                if section == P_REACH:
                    return f"Reach follow-up ({self.horizon_days:g} d)"
                return COLUMNS[section]
            if role == Qt.ToolTipRole:
                return _HEADER_TIPS[section]
            return None
        if role == Qt.DisplayRole:
            return str(section + 1)
        return None

    def data(self, index, role=Qt.DisplayRole):
        role = role if type(role) is int else int(role)
        if role not in _HANDLED_ROLES or self.scores is None or not index.isValid():
            return None
        column = index.column()
        if role == _ALIGNMENT:
            return _RIGHT if column in (DAYS_SINCE, P_NOW, P_REACH) else _LEFT
        row = int(self.order[index.row()])
        if role == _DISPLAY or role == _ACCESSIBLE_TEXT:
            return self._text(row, column)
        if role == _PROBABILITY:
            if column == P_NOW:
                return float(self.scores.p_follow_up_now[row])
            if column == P_REACH:
                return float(self.scores.p_reach_follow_up[row])
            if column == STAGE:
                return float(self.most_likely_p[row])
            return None
        if role == _CASE_ROW:
            return row
        if role == _TOOLTIP:
            if column == FLAGS and self.is_flagged[row]:
                return self.reasons_of(row) or None
            if column in PROBABILITY_COLUMNS:
                return "Advisory estimate from the stage model, not a diagnosis."
            if column == REVIEW and self.review_note[row]:
                return f"Review note: {self.review_note[row]}"
            if column == NEXT_DUE and self.next_due[row] >= 0:
                return from_day(int(self.next_due[row])).isoformat()
        return None

    def reasons_of(self, row: int) -> str:
        """Reason line of scores row ``row``; worked out on the spot (one case, a few milliseconds)
        if the window's background job has not reached it yet."""
        a = self.assessment
        if a is not None and not a.has_reasons(row):
            a.explain_cases([row])
        return str(self.reason_text[row])

    def probability_at(self, view_row: int, column: int):
        """Raw probability (0..1) behind a bar cell, or None (same as PROBABILITY_ROLE)."""
        if self.scores is None or not 0 <= view_row < self.order.size:
            return None
        row = int(self.order[view_row])
        if column == P_NOW:
            return float(self.scores.p_follow_up_now[row])
        if column == P_REACH:
            return float(self.scores.p_reach_follow_up[row])
        if column == STAGE:
            return float(self.most_likely_p[row])
        return None

    def _text(self, row: int, column: int) -> str:
        s = self.scores
        if column == CASE:
            return str(self.case_ids[row])
        if column == COORDINATOR:
            return str(self.coordinators[row]) or "-"
        if column == LAST_CONTACT:
            return from_day(s.last_contact_day[row]).isoformat()
        if column == DAYS_SINCE:
            return str(int(s.days_since_contact[row]))
        if column == STAGE:
            return f"{self.stage_names[self.most_likely[row]]} ({self.most_likely_p[row] * 100:.0f}%)"
        if column == P_NOW:
            return f"{s.p_follow_up_now[row] * 100:.0f}%"
        if column == P_REACH:
            return f"{s.p_reach_follow_up[row] * 100:.0f}%"
        if column == NEXT_DUE:
            day = int(self.next_due[row])
            if day < 0:
                return "-"
            return due_words(day, s.as_of_day)
        if column == FLAGS:
            return str(self.flag_names[row]).replace("_", " ").replace(";", ", ")
        if column == REVIEW:
            return str(self.review[row]) or ("not reviewed" if self.is_flagged[row] else "")
        return ""

    def sort(self, column: int, order=Qt.AscendingOrder) -> None:
        """Sort by a column (``-1`` = priority, highest first)."""
        if self.scores is None:
            return
        self._sort_column = int(column)
        self._sort_descending = order == Qt.DescendingOrder if column >= 0 else True
        self.layoutAboutToBeChanged.emit()
        old_order = self.order
        self.order = self._sorted(old_order)
        self._remap_persistent(old_order)
        self.layoutChanged.emit()

    def sort_by_priority(self) -> None:
        self.sort(-1)

    @property
    def sort_column(self) -> int:
        return self._sort_column

    def _sorted(self, rows: np.ndarray) -> np.ndarray:
        key = self._keys[self._sort_column][rows]
        if self._sort_descending:
            # stable descending: sort the negated key (ties keep their order)
            order = np.argsort(-key.astype(float), kind="stable")
        else:
            order = np.argsort(key, kind="stable")
        return rows[order]

    def _remap_persistent(self, old_order: np.ndarray) -> None:
        persistent = self.persistentIndexList()
        if not persistent:
            return
        position = np.empty(self._n, dtype=np.int64)
        position[self.order] = np.arange(self.order.size)
        new = []
        for index in persistent:
            case_row = int(old_order[index.row()])
            new.append(self.index(int(position[case_row]), index.column()))
        self.changePersistentIndexList(persistent, new)

    # -------------------------------------------------------------------- filters
    def set_filters(self, **changes) -> None:
        """Change filters: ``coordinator`` ('' = all), ``stage`` (index, -1 = all), ``flagged_only``,
        ``review`` (status text, '' = not reviewed, None = all), ``search`` (case-ID substring)."""
        unknown = set(changes) - set(self._filters)
        if unknown:
            raise KeyError(f"unknown filter(s): {', '.join(sorted(unknown))}")
        self._filters.update(changes)
        if self.scores is None:
            return
        self.beginResetModel()
        self._mask = self._compute_mask()
        self.order = self._sorted(np.flatnonzero(self._mask))
        self.endResetModel()

    @property
    def filters(self) -> dict:
        return dict(self._filters)

    def _compute_mask(self, rows: np.ndarray | None = None) -> np.ndarray:
        """Which rows pass the filters: every row, shape (n_cases,), or only ``rows``, shape (len(rows),)."""
        f = self._filters
        every = slice(None) if rows is None else rows
        mask = np.ones(self._n if rows is None else len(rows), dtype=bool)
        if f["coordinator"]:
            mask &= self.coordinators[every] == f["coordinator"]
        if f["stage"] is not None and f["stage"] >= 0:
            mask &= self.most_likely[every] == f["stage"]
        if f["flagged_only"]:
            mask &= self.is_flagged[every]
        if f["review"] is not None:
            mask &= self.review[every] == f["review"]
        from caseview.timeline_io.case_ids import search_key

        text = search_key(f["search"])   # read like an imported case ID (dashes, full-width, letter case)
        if text and mask.size:
            mask &= np.char.find(self._case_id_keys[every], text) >= 0
        return mask

    # -------------------------------------------------------------------- helpers
    def case_row(self, view_row: int) -> int:
        """Scores row shown at ``view_row``."""
        return int(self.order[view_row])

    def view_row_of_case(self, case_id: str) -> int:
        """Display row of ``case_id`` or -1 (hidden or unknown)."""
        rows = []
        if self.order.size:
            at = int(np.searchsorted(self.case_ids, case_id))  # scores keep cases in case-ID order
            rows = [at] if at < self._n and self.case_ids[at] == case_id else np.flatnonzero(self.case_ids == case_id)
        hits = np.flatnonzero(self.order == rows[0]) if len(rows) else []
        return int(hits[0]) if len(hits) else -1

    def coordinator_names(self) -> list:
        return sorted({str(c) for c in self.coordinators if c}) if self.scores is not None else []

    def set_review_status(self, case_row: int, status: str, note: str = "") -> None:
        """Show a new review status (and its note) for one case (after :func:`record_review`)."""
        self.review[case_row] = status
        self.review_note[case_row] = note
        self._keys[REVIEW] = _ranks(self.review)
        position = np.flatnonzero(self.order == case_row)
        if position.size:
            index = self.index(int(position[0]), REVIEW)
            self.dataChanged.emit(index, index, [Qt.DisplayRole])


_HEADER_TIPS = {
    CASE: "Pseudonymous case code",
    COORDINATOR: "Care coordinator at the last contact",
    LAST_CONTACT: "Date of the last recorded contact on or before the as-of date",
    DAYS_SINCE: "Days from the last contact to the as-of date",
    STAGE: "Most likely stage on the as-of date and its probability (advisory)",
    P_NOW: "Chance of being in a follow-up stage on the as-of date (advisory)",
    P_REACH: "Chance of being in a follow-up stage at least once within the horizon (advisory)",
    NEXT_DUE: ("When the next contact is due: the day the chance of a follow-up stage reaches the rule's threshold "
               "if nothing new is observed, at the latest 16 weeks after the last contact; 'overdue by N days' "
               "when that day has passed. Sorting puts the most overdue first."),
    FLAGS: "Follow-up rules that fired; hover for the reasons",
    REVIEW: "Supervisor review status of the flag (hover for the note)",
}
