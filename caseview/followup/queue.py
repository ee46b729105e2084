"""The supervisor's queue: which flagged cases to list, in which order, and the counts beside it.

No Qt and no database here: the risk queue panel shows what these functions return, and the same
numbers can be printed or reported.

Order of the queue: flags nobody has reviewed yet first, then acknowledged ones (still open), then
the closed ones (actioned, dismissed); within each group the highest priority first, ties by case ID.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Review statuses in the order the queue lists them ("new" = flagged, nobody has reviewed it yet).
QUEUE_STATUSES = ("new", "acknowledged", "actioned", "dismissed")


def queue_status(assessment) -> np.ndarray:
    """Review status of each case as the queue shows it ('' -> 'new' for flagged cases), shape (n_cases,)."""
    status = np.asarray(assessment.review_status, dtype=object)
    flagged = np.asarray(assessment.is_flagged, dtype=bool)
    return np.where(flagged & (status == ""), "new", status).astype(object)


def overdue_mask(assessment) -> np.ndarray:
    """Flagged, not reviewed yet, and the next contact due on or before the as-of date, shape (n_cases,)."""
    due = np.asarray(assessment.next_contact_due_day, dtype=np.int64)
    flagged = np.asarray(assessment.is_flagged, dtype=bool)
    return flagged & (due >= 0) & (due <= int(assessment.scores.as_of_day)) & (queue_status(assessment) == "new")


def queue_rows(assessment, coordinator: str | None = None, status: str | None = None,
               overdue_only: bool = False) -> np.ndarray:
    """Rows (into the scores arrays) of the flagged cases to list, in queue order.

    Parameters
    ----------
    coordinator : str, optional
        Only this coordinator's cases (None or '' = all).
    status : str, optional
        Only this review status (one of :data:`QUEUE_STATUSES`; None = all).
    overdue_only : bool
        Only the cases counted by :func:`overdue_mask`.

    Returns
    -------
    ndarray of int64, shape (m,)
    """
    scores = assessment.scores
    keep = np.asarray(assessment.is_flagged, dtype=bool).copy()
    current = queue_status(assessment)
    if coordinator:
        keep &= np.asarray(scores.coordinators, dtype=object) == coordinator
    if status:
        keep &= current == status
    if overdue_only:
        keep &= overdue_mask(assessment)
    rows = np.flatnonzero(keep)
    if not rows.size:
        return rows.astype(np.int64)
    group = np.select([current[rows] == "new", current[rows] == "acknowledged"], [0, 1], 2)
    case_ids = np.asarray(scores.case_ids)[rows].astype(str)
    order = np.lexsort((case_ids, -np.asarray(assessment.priority, dtype=float)[rows], group))
    return rows[order].astype(np.int64)


@dataclass(frozen=True)
class CoordinatorCounts:
    """Flagged cases of one coordinator by review status, and how many are overdue."""

    coordinator: str
    by_status: dict
    overdue: int

    @property
    def total(self) -> int:
        return int(sum(self.by_status.values()))


def counts_by_coordinator(assessment) -> list:
    """One :class:`CoordinatorCounts` per coordinator with flagged cases, sorted by coordinator."""
    flagged = np.flatnonzero(np.asarray(assessment.is_flagged, dtype=bool))
    coordinators = np.asarray(assessment.scores.coordinators, dtype=object)[flagged].astype(str)
    status = queue_status(assessment)[flagged].astype(str)
    overdue = overdue_mask(assessment)[flagged]
    names, which = np.unique(coordinators, return_inverse=True)
    which = which.reshape(-1)
    out = []
    for k, name in enumerate(names.tolist()):
        mine = which == k
        out.append(CoordinatorCounts(name, {s: int(np.count_nonzero(status[mine] == s)) for s in QUEUE_STATUSES},
                                     int(np.count_nonzero(overdue & mine))))
    return out
