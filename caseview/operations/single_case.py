"""Rescore one case of an already scored caseload, reading only that case's contacts.

After a contact is recorded, corrected or voided the window needs the new estimate of that one case
at once. Rescoring the caseload (100,000 cases) takes seconds; this reads the case's rows by its
key, scores and assesses it alone with the same functions the caseload uses
(:func:`caseview.scoring.score_loaded`, :func:`caseview.followup.assess_scores`), and splices the
result into copies of the caseload's arrays (the row replaced, inserted in case-ID order, or
removed when the case has no current contact left or is closed).
"""

from __future__ import annotations

import contextlib
import dataclasses
import weakref

import numpy as np

#: Room left at the end of each contact-row buffer, so later changes move rows instead of allocating.
SPARE_ROWS = 4096

#: Fields of ``CaseloadScores`` that are not one row per case (or are rebuilt separately).
_SCORE_OTHER = ("caseload", "timelines", "case_rows", "model")
#: Fields of ``CaseloadAssessment`` that are not one row per case (or are spliced separately).
_ASSESSMENT_OTHER = ("scores", "rules", "reasons", "evaluation")


def _per_case_fields(obj, skip, n: int) -> list:
    """Names of the dataclass fields of ``obj`` holding one row per case (arrays of length ``n``);
    found rather than listed, so fields added later are spliced too."""
    names = []
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if f.name not in skip and isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[0] == n:
            names.append(f.name)
    return names


_BLAS = []


def few_blas_threads():
    """Context: BLAS/LAPACK on one thread while one case is rescored.

    One case means 5x5 matrices; with OpenBLAS's threads a ``scipy.linalg.expm`` of one such
    matrix took 15 ms instead of 0.03 ms on the shared 2-core machine (threads woken for
    nothing and waiting for a busy core). Without ``threadpoolctl`` nothing changes.
    """
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController

            _BLAS.append(ThreadpoolController())
        except Exception:  # noqa: BLE001 - optional: no limit rather than no rescoring
            _BLAS.append(None)
    controller = _BLAS[0]
    return controller.limit(limits=1, user_api="blas") if controller is not None else contextlib.nullcontext()


class _Splice:
    """Where one case goes: replace row ``row`` (present and kept), insert at ``row``, or delete ``row``."""

    def __init__(self, row: int, present: bool, keep: bool):
        self.row, self.present, self.keep = row, present, keep

    def per_case(self, old, new):
        """``old`` (n, ...) with the case's row replaced/inserted/removed; ``new`` has shape (1, ...).

        A replaced row is written into ``old`` itself (no copy of the caseload's arrays: the
        caller's caseload is superseded by the result).
        """
        old = np.asarray(old)
        new = np.asarray(new, dtype=old.dtype) if new is not None else None
        r = self.row
        if self.present and self.keep:
            old[r] = new[0]
            return old
        if self.present:
            return np.concatenate([old[:r], old[r + 1:]])
        return np.concatenate([old[:r], new, old[r:]])

    def per_contact(self, old, new, old_offsets):
        """Contact-row array (n_contacts, ...) with the case's rows replaced by ``new``.

        In place when the case keeps its number of contacts. Otherwise the rows on the shorter side
        of the case (before it or after it) move within the array's buffer when it has room (a
        buffer keeps :data:`SPARE_ROWS` at each end), else everything goes into a new buffer with
        room to spare: allocating and first touching ~50 MB of fresh pages per change costs more
        than the move itself.
        """
        a = int(old_offsets[self.row])
        b = int(old_offsets[self.row + 1]) if self.present else a
        k = len(new) if self.keep and new is not None else 0
        if self.keep and self.present and k == b - a:
            old[a:b] = new
            return old
        n = old.shape[0]
        m = n - (b - a) + k
        base, start = _buffer_of(old)
        if base is not None:
            head = start - (m - n)               # where the rows start if those before the case move instead
            tail_fits = start + m <= base.shape[0]
            head_fits = 0 <= head and head + m <= base.shape[0]
            if head_fits and (a < n - b or not tail_fits):
                _move(base, head, start, start + a)
                start = head
            elif tail_fits:
                _move(base, start + a + k, start + b, start + n)
            else:
                base = None
        if base is None:
            spare = max(SPARE_ROWS, m // 100)
            base = np.empty((m + 2 * spare,) + old.shape[1:], dtype=old.dtype)
            _own(base)
            start = spare
            base[start:start + a] = old[:a]
            base[start + a + k:start + m] = old[b:n]
        if k:
            base[start + a:start + a + k] = new
        return base[start:start + m]

    def offsets(self, old_offsets, new_count: int):
        r = self.row
        if self.present:
            removed = int(old_offsets[r + 1] - old_offsets[r])
            if self.keep:
                return np.concatenate([old_offsets[:r + 1], old_offsets[r + 1:] + (new_count - removed)])
            return np.concatenate([old_offsets[:r], old_offsets[r + 1:] - removed])
        return np.concatenate([old_offsets[:r + 1], old_offsets[r:] + new_count])


#: Buffers this module allocated, by id (only those are reused: another array's base may hold other data
#: around it). Weak references: a buffer no caseload uses any more is freed and leaves the table.
_OWN_BUFFERS = {}


def _own(base) -> None:
    key = id(base)
    _OWN_BUFFERS[key] = weakref.ref(base, lambda _ref, key=key: _OWN_BUFFERS.pop(key, None))


def _is_own(base) -> bool:
    ref = _OWN_BUFFERS.get(id(base))
    return ref is not None and ref() is base


def _buffer_of(array):
    """``(buffer, first row)`` when ``array`` is a run of whole rows of a buffer allocated here, else ``(None, 0)``."""
    base = array.base
    if not (isinstance(base, np.ndarray) and _is_own(base) and base.ndim == array.ndim and base.shape[1:] == array.shape[1:]
            and base.dtype == array.dtype and base.flags.c_contiguous and array.flags.c_contiguous):
        return None, 0
    row_bytes = array.strides[0] if array.ndim else array.itemsize
    offset = array.ctypes.data - base.ctypes.data
    if row_bytes <= 0 or offset % row_bytes or not 0 <= offset // row_bytes <= base.shape[0] - array.shape[0]:
        return None, 0
    return base, offset // row_bytes


def _move(base, to: int, start: int, stop: int) -> None:
    """``base[to:to + stop - start] = base[start:stop]`` (overlapping ranges; numpy copies them correctly).

    Rows of 8-byte values move as one flat run: numpy copies a 2-D overlapping range through a
    slower path (measured: 3 ms against 0.35 ms for 600,000 rows of two floats).
    """
    if stop <= start or to == start:
        return
    if base.ndim > 1 and base.dtype.itemsize >= 8 and base.dtype != object:
        width = int(np.prod(base.shape[1:]))
        flat = base.reshape(-1)
        flat[to * width:(to + stop - start) * width] = flat[start * width:stop * width]
    else:
        base[to:to + stop - start] = base[start:stop]


def _timelines(old, new, splice: _Splice):
    from hmm import Timelines

    def rows(name):
        return splice.per_contact(getattr(old, name), getattr(new, name) if splice.keep else None, old.offsets)

    count = new.n_contacts if splice.keep else 0
    parts = {"offsets": splice.offsets(old.offsets, count).astype(np.int64), "times": rows("times"),
             "observations": rows("observations"), "allowed_stages": rows("allowed_stages"),
             "covariates": rows("covariates")}
    old_kind, new_kind = old.unscheduled, (new.unscheduled if splice.keep else None)   # contact_kind
    if old_kind is None and new_kind is None:
        parts["unscheduled"] = None
    else:
        if old_kind is None:
            old_kind = np.zeros(old.n_contacts, dtype=bool)
        if splice.keep and new_kind is None:
            new_kind = np.zeros(new.n_contacts, dtype=bool)
        parts["unscheduled"] = splice.per_contact(old_kind, new_kind, old.offsets)
    # Every part was checked when it was loaded (the caseload, and the case alone), and the splice
    # keeps the case order, so the 1.2-million-row check of Timelines.__post_init__ is not run again.
    spliced = object.__new__(Timelines)
    for name, value in parts.items():
        object.__setattr__(spliced, name, value)
    return spliced


def rescore_one(ws, loaded, case_id: str, include_closed: bool = False):
    """A new ``LoadedCaseload`` equal to ``loaded`` except for case ``case_id``, rescored.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    loaded : caseview.gui.data_source.LoadedCaseload (or any object with ``scores``, ``assessment``,
        ``notes``)
    case_id : str
    include_closed : bool
        Keep the case even if it is closed on the as-of date.

    Returns
    -------
    (new loaded, row) : the new caseload, and the case's row in it (-1 when it left the caseload).

    Notes
    -----
    ``loaded`` is consumed: to stay fast at 100,000 cases the new caseload reuses its arrays and
    buffers, writing the case's rows in place, so only the returned object may be used afterwards.
    """
    with few_blas_threads():
        return _rescore_one(ws, loaded, case_id, include_closed)


def _rescore_one(ws, loaded, case_id: str, include_closed: bool):
    from caseview.scoring import score_loaded
    from caseview.storage.caseload import Caseload

    scores = loaded.scores
    model = scores.model
    one = ws.load_case(model, case_id, as_of_day=scores.as_of_day)
    is_open = bool(ws.open_case_mask([case_id], scores.as_of_day)[0])
    keep = one.n_cases == 1 and (include_closed or is_open)
    ids = np.asarray(scores.case_ids, dtype=object)
    row = int(np.searchsorted(ids, case_id))
    present = row < ids.size and ids[row] == case_id
    if not present and not keep:
        return loaded, -1
    splice = _Splice(row, present, keep)
    fresh = score_loaded(one, model, scores.as_of_day, scores.horizon_days, scores.model_version) if keep else None
    if fresh is not None and scores.is_closed is not None:  # the closed mark is spliced with the other rows
        fresh = dataclasses.replace(fresh, is_closed=np.array([not is_open] * fresh.n_cases, dtype=bool))

    old_caseload = scores.caseload
    timelines = _timelines(scores.timelines, fresh.timelines if keep else None, splice)
    raw = {name: splice.per_contact(column, one.raw_values[name] if keep else None, scores.timelines.offsets)
           for name, column in old_caseload.raw_values.items()}
    caseload = Caseload(case_ids=splice.per_case(old_caseload.case_ids, one.case_ids if keep else None),
                        coordinators=splice.per_case(old_caseload.coordinators, one.coordinators if keep else None),
                        contact_days=splice.per_contact(old_caseload.contact_days, one.contact_days if keep else None,
                                                        scores.timelines.offsets),
                        timelines=timelines, raw_values=raw)
    changes = {name: splice.per_case(getattr(scores, name), getattr(fresh, name) if keep else None)
               for name in _per_case_fields(scores, _SCORE_OTHER, scores.n_cases)}
    n = changes["case_ids"].shape[0]
    new_scores = dataclasses.replace(scores, caseload=caseload, timelines=timelines,
                                     case_rows=np.arange(n, dtype=np.int64), **changes)

    assessment = _reassess(ws, loaded.assessment, new_scores, fresh, splice, case_id)
    return dataclasses.replace(loaded, scores=new_scores, assessment=assessment), (row if keep else -1)


def _reassess(ws, old, new_scores, fresh, splice: _Splice, case_id: str):
    from caseview.followup import assess_scores
    from caseview.followup.flags import RuleEvaluation
    from caseview.storage import followup_store

    keep = splice.keep
    one = None
    if keep:
        previous = np.array([old.previous_p_follow_up[splice.row] if splice.present else np.nan])
        one = assess_scores(fresh, old.rules, previous, old.previous_as_of,
                            followup_store.latest_reviews(ws.connection, case_id),
                            influence_contacts=old.influence_contacts, explain_reasons=True)
    changes = {}
    for name in _per_case_fields(old, _ASSESSMENT_OTHER, old.scores.n_cases):
        value = getattr(one, name) if keep else None
        if keep and value is None:  # the one-case assessment left it out: a blank row of the same kind
            value = np.zeros((1,) + getattr(old, name).shape[1:], dtype=getattr(old, name).dtype)
            if value.dtype == object:
                value[...] = ""
        changes[name] = splice.per_case(getattr(old, name), value)
    reasons = old.reasons  # a list: changed in place like the arrays
    if splice.present and keep:
        reasons[splice.row] = one.reasons[0]
    elif splice.present:
        del reasons[splice.row]
    else:
        reasons.insert(splice.row, one.reasons[0])
    evaluation = old.evaluation
    evaluation = RuleEvaluation(
        fired=splice.per_case(evaluation.fired, one.evaluation.fired if keep else None),
        values=splice.per_case(evaluation.values, one.evaluation.values if keep else None),
        rule_names=evaluation.rule_names)
    return dataclasses.replace(old, scores=new_scores, reasons=reasons, evaluation=evaluation, **changes)
