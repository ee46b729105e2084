"""Where the window's caseload comes from: a workspace on disk, scored in a worker thread.

The window talks to a *source* with this small interface (tests use an in-memory one):

``label`` (str), ``load(as_of, horizon_days, callback) -> LoadedCaseload`` (runs in a worker
thread; flags without their reasons, which the window works out afterwards), ``workspace()``
(a main-thread :class:`caseview.storage.Workspace`, or None), ``current_model()`` (StageModel),
``close()``.
"""

from __future__ import annotations

import datetime as dt
import gc
import threading
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from caseview.followup.assess import CaseloadAssessment
    from caseview.scoring import CaseloadScores


@dataclass
class LoadedCaseload:
    """Scores of one caseload as of one date, with its follow-up assessment.

    Attributes
    ----------
    scores : caseview.scoring.CaseloadScores
    assessment : caseview.followup.CaseloadAssessment
        Flags (reasons worked out later by the window), schedule and review state.
    notes : list[str]
        Plain messages for the status bar.
    reopen_candidates : list of (case_id, value_at_dismissal, value_now)
        Dismissed flags whose risk rose enough to re-open them; loading does not re-open them (it
        never writes), the risk queue offers the explicit step.
    """

    scores: CaseloadScores
    assessment: CaseloadAssessment
    notes: list = field(default_factory=list)
    reopen_candidates: list = field(default_factory=list)


@contextmanager
def full_collections_postponed():
    """Postpone the garbage collector's full collections while a worker builds many objects.

    A full collection walks every tracked object while holding the interpreter lock, so in a
    worker it freezes the window for 0.05-0.2 s at 100,000 cases, again and again as the worker
    adds objects. Young collections go on; the usual thresholds come back at the end.
    """
    with _POSTPONED_LOCK:  # jobs may overlap: the first one in raises the threshold, the last one out restores it
        if not _POSTPONED:
            _POSTPONED.append(gc.get_threshold())
            first, second, third = _POSTPONED[0]
            gc.set_threshold(first, second, max(third, 1_000_000))
        _POSTPONED.append(None)
    try:
        yield
    finally:
        with _POSTPONED_LOCK:
            _POSTPONED.pop()
            if len(_POSTPONED) == 1:
                gc.set_threshold(*_POSTPONED.pop())


_POSTPONED_LOCK = threading.Lock()
_POSTPONED: list = []  # [saved thresholds, one None per job inside]


#: Flagged cases explained per step of the window's reasons job (~0.06 s each at 100,000 cases;
#: small steps also keep the leave-one-out copies of the timelines small).
REASONS_PER_STEP = 1000


def reason_steps(assessment, first, per_step: int = REASONS_PER_STEP) -> list:
    """The order in which the window works out reasons, as a list of case-row arrays.

    ``first`` (for example the risk queue's rows) is one step of its own; then every other flagged
    case without reasons, highest priority first, ``per_step`` at a time.
    """
    import numpy as np

    pending = assessment.reasons_pending
    if not pending.size:
        return []
    first = np.asarray(first, dtype=np.int64)
    first = first[~assessment.explained[first]]
    rest = pending[np.argsort(-np.asarray(assessment.priority)[pending], kind="stable")]
    rest = rest[~np.isin(rest, first)]
    steps = [first] if first.size else []
    return steps + [rest[i:i + per_step] for i in range(0, rest.size, per_step)]


class WorkspaceSource:
    """A caseview workspace file. Worker threads open their own connection (one per thread)."""

    def __init__(self, path, password: str | None = None):
        from caseview.storage import Workspace
        from caseview.storage.location import workspace_location

        self.path = workspace_location(path)  # a file Path, or a PostgreSQL DatabaseURL
        self._password = password  # PostgreSQL: the prompted password, for worker threads' own connections
        self._workspace = Workspace.open(self.path, password=password)  # main-thread connection; raises WorkspaceError
        self.label = self.path.name
        self.include_closed = False  # the window's "Show closed" filter
        self.warnings = list(self._workspace.warnings)

    def workspace(self):
        return self._workspace

    def current_model(self):
        return self._workspace.current_model()[0]

    def load(self, as_of: dt.date, horizon_days: float, callback=None) -> LoadedCaseload:
        from caseview.followup import assess_caseload
        from caseview.followup.reviews import pending_reopens
        from caseview.storage import Workspace

        with full_collections_postponed(), Workspace.open(self.path, password=self._password) as ws:
            # flags now, reasons later: the window explains flagged cases in a second job
            # (risk queue first) and on the spot for a case the user selects
            # reopen=False: loading never writes (re-opening is the queue's explicit step)
            assessment = assess_caseload(ws, as_of, horizon_days, callback=callback, explain_reasons=False,
                                         reopen=False, include_closed=self.include_closed)
            return LoadedCaseload(assessment.scores, assessment, [], pending_reopens(ws, assessment))

    def open_workspace(self):
        """A new connection to the same workspace for a worker thread (with the prompted password, if any)."""
        from caseview.storage import Workspace

        return Workspace.open(self.path, password=self._password)

    def close(self) -> None:
        try:
            self._workspace.close()
        except Exception:  # closing must never fail loudly
            pass
