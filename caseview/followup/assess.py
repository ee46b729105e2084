"""Assess a caseload: scores, flags with reasons, next contact due, review status, priority.

:func:`assess_scores` is pure (no database); :func:`assess_caseload` adds the workspace: its rule
set, the previous saved score run (for ``sharp_rise``), the reviews, the automatic re-open of
dismissed flags, and optionally saves this run as a snapshot. It is cheap enough to run inside
``caseview score``: rules are vectorised and the leave-one-out reasons are computed for flagged
cases only. With ``explain_reasons=False`` the reasons are left for later: the window shows the
table at once and fills reasons in with :meth:`CaseloadAssessment.explain_cases` (the selected
case first, then the risk queue, then the rest, in a background job).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .flags import INFLUENCE_CONTACTS, RuleEvaluation, evaluate_rules, explain, explain_cases
from .rules import SCHEDULE_RULE, RuleSet, default_rules, workspace_rules
from .schedule import SEARCH_LIMIT_DAYS, contact_due_day

if TYPE_CHECKING:
    from caseview.scoring import CaseloadScores

#: The rule whose threshold (days since the last contact) is the longest a case waits for a contact.
ROUTINE_RULE = "long_gap_uncertain"


@dataclass(eq=False)
class CaseloadAssessment:
    """Flags, reasons, schedule and review state; arrays aligned with ``scores`` rows.

    Not frozen, and honest about it: the reasons of flagged cases are worked out later, in place
    (:meth:`explain_cases`, from a background job while the window reads), and a recorded review is
    written in by :meth:`note_review` (which :func:`caseview.followup.record_review` calls). Those
    two methods, and :func:`caseview.operations.single_case.rescore_one` (which consumes the old
    object), are the only writers; views read.

    Attributes
    ----------
    scores : caseview.scoring.CaseloadScores
    rules : RuleSet
    flags : ndarray of object, shape (n_cases,)
        Names of the rules that fired joined by ';' ('' when none).
    is_flagged : ndarray of bool, shape (n_cases,)
    reasons : list[list[FlagReason]], length n_cases
        Empty for a flagged case whose reasons are not worked out yet (see ``explained``).
    reason_text : ndarray of object, shape (n_cases,)
        One readable line per case ('' when not flagged or not worked out yet).
    next_contact_due_day : ndarray of int64, shape (n_cases,)
        Day (since 1970-01-01) the next contact is due, for every case: the day the follow-up
        probability reaches the ``in_follow_up_now`` threshold if nothing new is observed (for a
        case already over it, the day after its last contact when it got there: before the as-of
        date means overdue), and at the latest the ``long_gap_uncertain`` threshold (16 weeks by
        default) after the last contact; see :func:`~caseview.followup.schedule.contact_due_day`.
    review_status : ndarray of object, shape (n_cases,)
        '' (not flagged, never reviewed) | new | acknowledged | actioned | dismissed.
    reviewed_by, reviewed_at : ndarray of object, shape (n_cases,)
        Actor and UTC time of the latest review ('' when none).
    review_note : ndarray of object, shape (n_cases,)
        Note of the latest review ('' when none).
    priority : ndarray, shape (n_cases,)
        Higher = contact sooner: ``is_flagged + (p_follow_up_now + p_reach_follow_up) / 2``, so
        every flagged case ranks above every unflagged one and, within each group, cases rank by
        their follow-up probabilities.
    evaluation : RuleEvaluation
        Which rules fired and their values (kept to explain flags later).
    explained : ndarray of bool, shape (n_cases,)
        True where ``reasons``/``reason_text`` are final: every unflagged case, and the flagged
        cases whose reasons were worked out (all of them unless ``explain_reasons=False``).
    previous_as_of : date or None
        As-of date of the saved run used by ``sharp_rise`` (None: no earlier run).
    previous_p_follow_up : ndarray, shape (n_cases,)
        P(follow-up now) in that run (NaN where the case was not in it, or no run).
    reopened : tuple of str
        Case IDs whose dismissed flag this assessment re-opened.
    saved_run_id : int or None
        The stored snapshot of this run (None: not saved).
    influence_contacts : int
        Recent contacts tested by leaving them out.
    """

    scores: CaseloadScores
    rules: RuleSet
    flags: np.ndarray
    is_flagged: np.ndarray
    reasons: list
    reason_text: np.ndarray
    next_contact_due_day: np.ndarray
    review_status: np.ndarray
    reviewed_by: np.ndarray
    reviewed_at: np.ndarray
    review_note: np.ndarray
    priority: np.ndarray
    evaluation: RuleEvaluation
    explained: np.ndarray
    previous_as_of: dt.date | None
    previous_p_follow_up: np.ndarray
    reopened: tuple = ()
    saved_run_id: int | None = None
    influence_contacts: int = INFLUENCE_CONTACTS

    def note_review(self, case: int, review) -> None:
        """Show a review just stored (a ``followup_store.ReviewRow``) for case row ``case``."""
        self.review_status[case] = review.status
        self.reviewed_by[case], self.reviewed_at[case] = review.actor, review.at_utc
        self.review_note[case] = review.note or ""

    @property
    def reasons_pending(self) -> np.ndarray:
        """Flagged cases (rows) whose reasons are not worked out yet, shape (m,)."""
        return np.flatnonzero(~self.explained)

    def has_reasons(self, case: int) -> bool:
        """True when case row ``case`` needs no more work for its reasons."""
        return bool(self.explained[case])

    def explain_cases(self, cases) -> np.ndarray:
        """Work out the reasons of the flagged, not yet explained cases among ``cases`` (rows).

        Fills ``reasons``, ``reason_text`` and ``explained`` in place; the text of a case is
        written before it is marked explained, so a reader that sees ``explained`` sees the text.
        Safe to call from a worker thread while the window reads (each case is written whole).

        Returns
        -------
        ndarray of int64
            The rows newly explained.
        """
        cases = np.asarray(cases, dtype=np.int64).reshape(-1)
        if not cases.size:
            return np.zeros(0, dtype=np.int64)
        todo = cases[~self.explained[cases]]
        if not todo.size:
            return todo
        todo = todo[np.sort(np.unique(todo, return_index=True)[1])]  # drop repeats, keep the order
        flagged, reasons, text = explain_cases(self.scores, self.rules, self.evaluation, todo,
                                               self.previous_p_follow_up, self.previous_as_of,
                                               self.influence_contacts)
        for case, case_reasons, line in zip(flagged, reasons, text):
            self.reasons[case] = case_reasons
            self.reason_text[case] = line
        self.explained[todo] = True
        return todo

    @property
    def order(self) -> np.ndarray:
        """Default table order: highest priority first (ties by case ID)."""
        return np.lexsort((self.scores.case_ids.astype(str), -self.priority))

    def flag_counts(self) -> dict:
        """Rule name -> number of cases it flagged."""
        return {name: int(sum(name in f.split(";") for f in self.flags if f)) for name in self.rules.names}


def _review_arrays(case_ids, is_flagged, latest: dict):
    n = len(case_ids)
    status = np.where(is_flagged, "new", "").astype(object)
    by = np.full(n, "", dtype=object)
    at = np.full(n, "", dtype=object)
    note = np.full(n, "", dtype=object)
    if latest:
        for i, code in enumerate(case_ids):
            review = latest.get(str(code))
            if review is not None:
                status[i], by[i], at[i], note[i] = review.status, review.actor, review.at_utc, review.note or ""
    return status, by, at, note


def _flag_names(fired: np.ndarray, names: np.ndarray) -> np.ndarray:
    """Names of the rules that fired joined by ';', per case; one join per distinct pattern."""
    n = fired.shape[0]
    if not n or not fired.shape[1]:
        return np.full(n, "", dtype=object)
    patterns, which = np.unique(np.packbits(fired, axis=1), axis=0, return_inverse=True)
    unpacked = np.unpackbits(patterns, axis=1, count=fired.shape[1]).astype(bool)
    text = np.array([";".join(names[row]) for row in unpacked] + [""], dtype=object)[:-1]
    return text[which.reshape(-1)]


def assess_scores(scores, rules: RuleSet | None = None, previous_p_follow_up=None,
                  previous_as_of: dt.date | None = None, latest_reviews: dict | None = None,
                  influence_contacts: int = INFLUENCE_CONTACTS,
                  schedule_limit_days: int = SEARCH_LIMIT_DAYS, explain_reasons: bool = True) -> CaseloadAssessment:
    """Flags, reasons and schedule for already computed scores (no database).

    Parameters
    ----------
    scores : caseview.scoring.CaseloadScores
    rules : RuleSet, optional
        Default rules when None.
    previous_p_follow_up : ndarray, shape (n_cases,), optional
        P(follow-up now) per case in the previous saved run (NaN where absent).
    latest_reviews : dict, optional
        Case code -> latest ``ReviewRow``.
    """
    rules = rules or default_rules()
    n = scores.n_cases
    previous = np.full(n, np.nan) if previous_p_follow_up is None else np.asarray(previous_p_follow_up, float)
    evaluation = evaluate_rules(scores, rules, previous)
    is_flagged = evaluation.fired.any(axis=1)
    names = np.asarray(rules.names, dtype=object)
    flags = _flag_names(evaluation.fired, names)
    if explain_reasons:
        reasons, reason_text = explain(scores, rules, evaluation, previous, previous_as_of, influence_contacts)
        explained = np.ones(n, dtype=bool)
    else:  # only which rules fired (caseview score), or reasons later (the window: explain_cases)
        reasons, reason_text = [[] for _ in range(n)], np.full(n, "", dtype=object)
        explained = ~is_flagged
    due = contact_due_day(scores.model, scores.p_now, scores.last_covariates, rules[SCHEDULE_RULE].threshold,
                          scores.as_of_day, scores.p_at_last_contact, scores.last_contact_day,
                          rules[ROUTINE_RULE].threshold, schedule_limit_days)
    status, by, at, note = _review_arrays(scores.case_ids, is_flagged, latest_reviews or {})
    priority = is_flagged.astype(float) + 0.5 * (scores.p_follow_up_now + scores.p_reach_follow_up)
    return CaseloadAssessment(scores, rules, flags, is_flagged, reasons, reason_text, due, status, by, at, note,
                              priority, evaluation, explained, previous_as_of, previous,
                              influence_contacts=influence_contacts)


def assess_caseload(ws, as_of: dt.date, horizon_days: float = 90.0, rules: RuleSet | None = None,
                    callback=None, save_snapshot: bool = False, reopen: bool = True,
                    actor: str | None = None, explain_reasons: bool = True,
                    include_closed: bool = False) -> CaseloadAssessment:
    """Score the workspace's caseload as of ``as_of`` and assess it.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    as_of : datetime.date
    horizon_days : float
    rules : RuleSet, optional
        The workspace's rules (setting ``follow_up_rules``, defaults if unset) when None.
    callback : callable(fraction), optional
        Progress; raise from it to cancel.
    save_snapshot : bool
        Store this run (``score_runs`` + ``case_scores``) for the next ``sharp_rise`` comparison;
        audited as ``scores.snapshot``.
    reopen : bool
        Re-open dismissed flags whose risk rose materially (see :mod:`caseview.followup.reviews`).
    actor : str, optional
        Recorded with a saved snapshot (default: the OS user).
    explain_reasons : bool
        Work out each flag's reasons and contact influence now (False: only which rules fired;
        reasons can be worked out later, case by case, with :meth:`CaseloadAssessment.explain_cases`).
    include_closed : bool
        Also assess cases closed on or before ``as_of`` (left out by default).
    """
    from caseview.scoring import score_caseload
    from caseview.storage import followup_store as store

    from .reviews import reopen_candidates, reopen_dismissed

    def scoring_progress(fraction):
        if callback:
            callback(0.8 * fraction)

    rules = rules or workspace_rules(ws)
    scores = score_caseload(ws, as_of, horizon_days, callback=scoring_progress, include_closed=include_closed)
    previous_run = store.previous_run(ws.connection, as_of.isoformat())
    previous, previous_as_of = None, None
    if previous_run is not None:
        _, previous_text, values = previous_run
        previous_as_of = dt.date.fromisoformat(previous_text)
        previous = np.array([values.get(str(code), np.nan) for code in scores.case_ids], dtype=float)
    latest = store.latest_reviews(ws.connection)
    assessment = assess_scores(scores, rules, previous, previous_as_of, latest, explain_reasons=explain_reasons)
    if callback:
        callback(0.9)
    reopened = []
    if reopen:
        candidates = reopen_candidates(latest, scores.case_ids, scores.p_follow_up_now, as_of)
        if candidates:
            flags_by_case = dict(zip(map(str, scores.case_ids), assessment.flags))
            reopened = reopen_dismissed(ws, candidates, as_of, flags_by_case)
            if reopened:
                status, by, at, note = _review_arrays(scores.case_ids, assessment.is_flagged,
                                                      store.latest_reviews(ws.connection))
                assessment = _replace(assessment, review_status=status, reviewed_by=by, reviewed_at=at,
                                      review_note=note)
    run_id = None
    if save_snapshot:
        run_id = save_run(ws, assessment, actor or _os_user())
    assessment = _replace(assessment, reopened=tuple(reopened), saved_run_id=run_id)
    if callback:
        callback(1.0)
    return assessment


def _replace(assessment, **changes):
    from dataclasses import replace

    return replace(assessment, **changes)


def _os_user() -> str:
    from caseview.attribution import os_user

    return os_user()


def save_run(ws, assessment: CaseloadAssessment, actor: str) -> int:
    """Store the assessment's scores as a snapshot, with its audit entry, in one transaction."""
    from caseview.storage import followup_store as store
    from caseview.storage.audit import utc_now
    from caseview.storage.row_digests import RowChanges

    scores = assessment.scores
    with ws.transaction():
        run_id = store.save_score_run(ws.connection, scores.as_of.isoformat(), scores.horizon_days,
                                      scores.model_version, utc_now(), scores.case_ids, scores.p_follow_up_now,
                                      scores.p_reach_follow_up, assessment.flags)
        ws.audit_append(actor, "scores.snapshot", f"score_run:{run_id}",
                        {"run_id": run_id, "as_of": scores.as_of.isoformat(), "horizon_days": scores.horizon_days,
                         "model_version": scores.model_version, "n_cases": scores.n_cases,
                         "n_flagged": int(assessment.is_flagged.sum()), "flag_counts": assessment.flag_counts()},
                        changes=RowChanges(rows={"score_runs": [run_id]}))
    return run_id
