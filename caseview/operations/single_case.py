"""Rescore one case of an already scored caseload, reading only that case's contacts.

After a contact is recorded, corrected or voided the window needs the new estimate of that one case
at once. Rescoring the caseload (100,000 cases) takes seconds; this reads the case's rows by its
key, scores and assesses it alone with the same functions the caseload uses
(:func:`caseview.scoring.score_loaded`, :func:`caseview.followup.assess_scores`), and splices the
result into copies of the caseload's arrays (the row replaced, inserted in case-ID order, or
removed when the case has no current contact left or is closed).
"""

from __future__ import annotations

import dataclasses

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

        In place when the case keeps its number of contacts. Otherwise the rows after the case
        move within the array's buffer when it has room (see :data:`SPARE_ROWS`), else into a new
        buffer with room to spare: allocating and first touching ~50 MB of fresh pages per change
        costs more than the move itself.
        """
        a = int(old_offsets[self.row])
        b = int(old_offsets[self.row + 1]) if self.present else a
        k = len(new) if self.keep and new is not None else 0
        if self.keep and self.present and k == b - a:
            old[a:b] = new
            return old
        n = old.shape[0]
        m = n - (b - a) + k
        base = old.base
        if (isinstance(base, np.ndarray) and base.shape[0] >= m and base.shape[1:] == old.shape[1:]
                and base.dtype == old.dtype and base.flags.c_contiguous and old.flags.c_contiguous
                and base.ctypes.data == old.ctypes.data):
            base[a + k:m] = base[b:n]  # overlapping move; numpy copies overlapping ranges correctly
        else:
            base = np.empty((m + max(SPARE_ROWS, m // 100),) + old.shape[1:], dtype=old.dtype)
            base[:a] = old[:a]
            base[a + k:m] = old[b:n]
        if k:
            base[a:a + k] = new
        return base[:m]

    def offsets(self, old_offsets, new_count: int):
        r = self.row
        if self.present:
            removed = int(old_offsets[r + 1] - old_offsets[r])
            if self.keep:
                return np.concatenate([old_offsets[:r + 1], old_offsets[r + 1:] + (new_count - removed)])
            return np.concatenate([old_offsets[:r], old_offsets[r + 1:] - removed])
        return np.concatenate([old_offsets[:r + 1], old_offsets[r:] + new_count])


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
    from caseview.scoring import score_loaded
    from caseview.storage.caseload import Caseload

    scores = loaded.scores
    model = scores.model
    one = ws.load_case(model, case_id, as_of_day=scores.as_of_day)
    keep = one.n_cases == 1 and (include_closed or bool(ws.open_case_mask([case_id], scores.as_of_day)[0]))
    ids = np.asarray(scores.case_ids, dtype=object)
    row = int(np.searchsorted(ids, case_id))
    present = row < ids.size and ids[row] == case_id
    if not present and not keep:
        return loaded, -1
    splice = _Splice(row, present, keep)
    fresh = score_loaded(one, model, scores.as_of_day, scores.horizon_days, scores.model_version) if keep else None

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
