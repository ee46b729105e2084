"""The supervisor's queue: which flagged cases to list, in which order, and the counts beside it.

No Qt and no database here: the risk queue panel shows what these functions return, and the same
numbers can be printed or reported.

Order of the queue: flags nobody has reviewed yet first, then acknowledged ones (still open), then
the closed ones (actioned, dismissed); within each group the highest priority first, ties by case ID.
"""

from __future__ import annotations

from bisect import bisect_left
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


def case_status(assessment, row: int) -> str:
    """:func:`queue_status` of one case (no pass over the caseload)."""
    status = str(assessment.review_status[row] or "")
    return "new" if bool(assessment.is_flagged[row]) and not status else status


def case_is_overdue(assessment, row: int) -> bool:
    """:func:`overdue_mask` of one case."""
    due = int(assessment.next_contact_due_day[row])
    return (bool(assessment.is_flagged[row]) and 0 <= due <= int(assessment.scores.as_of_day)
            and case_status(assessment, row) == "new")


def case_in_queue(assessment, row: int, coordinator: str | None = None, status: str | None = None,
                  overdue_only: bool = False) -> bool:
    """Whether :func:`queue_rows` with these filters lists case ``row`` (same rules, one case)."""
    if not bool(assessment.is_flagged[row]):
        return False
    if coordinator and assessment.scores.coordinators[row] != coordinator:
        return False
    if status and case_status(assessment, row) != status:
        return False
    return not overdue_only or case_is_overdue(assessment, row)


def queue_order_key(assessment, row: int, status=None) -> tuple:
    """Sort key of case ``row`` in the queue order of :func:`queue_rows` (review group, highest
    priority first with a missing priority last, then case ID); ``status`` is the case's
    :func:`queue_status` when already known."""
    status = case_status(assessment, row) if status is None else status
    group = 0 if status == "new" else 1 if status == "acknowledged" else 2
    priority = float(assessment.priority[row])
    missing = priority != priority
    return (group, missing, 0.0 if missing else -priority, str(assessment.scores.case_ids[row]))


def queue_position(assessment, rows: np.ndarray, row: int) -> int:
    """Where case ``row`` goes in ``rows`` (a queue in :func:`queue_rows` order without it), found by
    bisection: O(log m) keys instead of sorting the queue again after one case changed."""
    return bisect_left(rows, queue_order_key(assessment, row), key=lambda r: queue_order_key(assessment, int(r)))


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
