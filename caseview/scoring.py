"""Score a caseload: stage probabilities now, at the horizon, and the chance of reaching each stage.

This is glue between the workspace (storage) and the engine (``hmm``): it loads the timelines up
to the as-of date, runs the batched filter, propagates each case from its last contact to the
as-of date, and forecasts to the horizon. Every number it returns is advisory.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import numpy as np

from hmm import StageModel, Timelines
from hmm.forecasting import forecast, reach_probability, stage_probabilities_now
from hmm.inference import forward

from .dates import EPOCH, from_day, parse_date, to_day  # noqa: F401  (their home is caseview.dates)

if TYPE_CHECKING:
    from .storage.caseload import Caseload


def observation_end_day(timelines: Timelines) -> float:
    """The day observation of a caseload ended, for fitting a timing model: its latest recorded contact.

    A model with an ``unscheduled_contacts`` block counts the quiet time from each case's last contact
    to this day (``hmm.fitting.fit_model(observed_until=...)``); without the block it is not used.
    """
    return float(timelines.times.max()) if timelines.n_contacts else 0.0


@dataclass(frozen=True)
class UnscorableCases:
    """Cases that cannot be scored, and why; arrays aligned, one row per such case (m rows).

    Attributes
    ----------
    case_ids, coordinators : ndarray of object, shape (m,)
    case_rows : ndarray of int64, shape (m,)
        Rows in the loaded caseload.
    last_contact_day, days_since_contact, n_contacts : ndarray of int64, shape (m,)
    reasons : ndarray of object, shape (m,)
        For example "contradictory record: contact on 2026-05-05 after the recorded entry into
        absorbing stage Moved to residential care on 2026-03-05" (see :mod:`caseview.case_checks`).
    """

    case_ids: np.ndarray
    coordinators: np.ndarray
    case_rows: np.ndarray
    last_contact_day: np.ndarray
    days_since_contact: np.ndarray
    n_contacts: np.ndarray
    reasons: np.ndarray

    @property
    def n_cases(self) -> int:
        return int(self.case_ids.shape[0])

    def reason_of(self, case_id: str) -> str:
        """'' when ``case_id`` is not among these cases."""
        hits = np.flatnonzero(self.case_ids == case_id)
        return str(self.reasons[hits[0]]) if hits.size else ""

    def summary(self, limit: int = 3) -> str:
        """One line naming the first ``limit`` cases with their reasons, and how many more."""
        named = "; ".join(f"{c} ({r})" for c, r in zip(self.case_ids[:limit], self.reasons[:limit]))
        more = f"; and {self.n_cases - limit} more" if self.n_cases > limit else ""
        return (f"{self.n_cases} case{'s' if self.n_cases != 1 else ''} cannot be scored: {named}{more}"
                if self.n_cases else "")


def _no_unscorable() -> UnscorableCases:
    ints = np.zeros(0, dtype=np.int64)
    return UnscorableCases(np.zeros(0, dtype=object), np.zeros(0, dtype=object), ints, ints, ints, ints,
                           np.zeros(0, dtype=object))


@dataclass(frozen=True)
class CaseloadScores:
    """Per-case scores as of one date; all arrays have one row per scored case.

    Attributes
    ----------
    p_now : ndarray, shape (n_cases, n_stages)
        Stage probabilities on the as-of date (filtered at the last contact, then propagated).
    p_at_horizon : ndarray, shape (n_cases, n_stages)
        Stage probabilities ``horizon_days`` after the as-of date if nothing new is observed.
    p_reach : ndarray, shape (n_cases, n_stages)
        Probability of being in each stage at least once between the as-of date and the horizon.
    p_follow_up_now, p_reach_follow_up : ndarray, shape (n_cases,)
        The same for the follow-up stages taken together.
    p_at_last_contact : ndarray, shape (n_cases, n_stages), or None
        Stage probabilities at the last contact (filtered); the schedule uses them to date when a
        case went over the follow-up threshold between that contact and the as-of date.
    unscorable : UnscorableCases
        Cases left out of every array above because they cannot be scored (a covariate outside
        its range, a rate that overflows, a contradictory or impossible record), with the reason;
        one case's failure never stops the others.
    is_closed : ndarray of bool, shape (n_cases,), or None
        True for a case closed on the as-of date; present only when scoring was asked to include
        closed cases (the window's "Show closed"), None when every scored case is open. The
        outlook and targeting leave closed cases out either way.
    """

    as_of: dt.date
    as_of_day: int
    horizon_days: float
    model: StageModel
    model_version: int | None
    case_ids: np.ndarray
    coordinators: np.ndarray
    case_rows: np.ndarray
    first_contact_day: np.ndarray
    last_contact_day: np.ndarray
    days_since_contact: np.ndarray
    n_contacts: np.ndarray
    p_now: np.ndarray
    most_likely_stage: np.ndarray
    p_at_horizon: np.ndarray
    p_reach: np.ndarray
    p_follow_up_now: np.ndarray
    p_reach_follow_up: np.ndarray
    last_covariates: np.ndarray
    log_likelihood: np.ndarray
    caseload: Caseload
    timelines: Timelines
    p_at_last_contact: np.ndarray | None = None
    unscorable: UnscorableCases = field(default_factory=_no_unscorable)
    is_closed: np.ndarray | None = None

    @property
    def n_cases(self) -> int:
        return int(self.case_ids.shape[0])

    @property
    def most_likely_stage_names(self) -> np.ndarray:
        return np.asarray(self.model.stages, dtype=object)[self.most_likely_stage]

    @property
    def most_likely_probability(self) -> np.ndarray:
        return self.p_now[np.arange(self.n_cases), self.most_likely_stage]

    def row_of(self, case_id: str) -> int:
        """Row of ``case_id`` or -1."""
        hits = np.flatnonzero(self.case_ids == case_id)
        return int(hits[0]) if hits.size else -1


def _unscorable(caseload, timelines: Timelines, kept: np.ndarray, cases: np.ndarray, reasons: np.ndarray,
                as_of_day: int) -> UnscorableCases:
    """The record of ``cases`` (indices into ``timelines``) with their reasons, in case order."""
    order = np.sort(cases)
    last = timelines.times[timelines.last_index[order]].astype(np.int64)
    rows = kept[order]
    return UnscorableCases(np.asarray(caseload.case_ids)[rows], np.asarray(caseload.coordinators)[rows], rows, last,
                           int(as_of_day) - last, timelines.n_contacts_per_case[order],
                           np.asarray(reasons, dtype=object)[order])


def split_unscorable(caseload, model: StageModel, timelines: Timelines, kept: np.ndarray, as_of_day: int):
    """Set aside the cases that cannot be scored; run the forward pass on the others.

    Parameters
    ----------
    caseload : caseview.storage.Caseload
    model : StageModel
    timelines : Timelines
        The caseload's timelines (already cut to ``as_of_day``).
    kept : ndarray of int64, shape (n_cases,)
        Row of each of ``timelines``' cases in ``caseload``.
    as_of_day : int

    Returns
    -------
    timelines : Timelines
        Only the cases that can be scored (the same object when that is all of them).
    kept : ndarray of int64
        Their rows in ``caseload``.
    forward_result : hmm.inference.ForwardResult or None
        Their forward pass (None when none is left).
    unscorable : UnscorableCases
    """
    from .case_checks import IMPOSSIBLE_REASON, unscorable_reasons

    reasons = unscorable_reasons(model, timelines)
    scorable = reasons == ""
    all_cases, all_kept = timelines, kept
    if not scorable.all():
        timelines, kept = timelines.subset(scorable), kept[scorable]
    result = forward(model, timelines) if timelines.n_cases else None
    if result is not None and not result.finite.all():
        # evidence impossible under the model (or a numerical failure the checks did not foresee)
        finite = result.finite
        cases = np.flatnonzero(scorable)
        reasons[cases[~finite]] = np.where(np.isneginf(result.log_likelihood[~finite]), IMPOSSIBLE_REASON,
                                           "numerical failure: the likelihood is not a number")
        scorable[cases[~finite]] = False
        rows = np.repeat(finite, timelines.n_contacts_per_case)
        result = type(result)(result.log_likelihood[finite], result.filtered[rows], result.log_scale[rows])
        timelines, kept = timelines.subset(finite), kept[finite]
    unscorable = _unscorable(caseload, all_cases, all_kept, np.flatnonzero(~scorable), reasons, as_of_day) \
        if not scorable.all() else _no_unscorable()
    return timelines, kept, result, unscorable


def score_loaded(caseload, model: StageModel, as_of_day: int, horizon_days: float = 90.0,
                 model_version: int | None = None, callback=None) -> CaseloadScores:
    """Score an already loaded caseload (no database access).

    ``caseload`` is a :class:`caseview.storage.Caseload`; only its contacts on or before
    ``as_of_day`` are used and only cases whose first contact is on or before it are scored.
    A case that cannot be scored (:func:`caseview.case_checks.unscorable_reasons`, or evidence
    with probability zero under the model) is left out of the score arrays and listed in
    ``unscorable`` with its reason; the other cases get exactly the numbers they would get alone.
    """
    if horizon_days < 0 or not np.isfinite(horizon_days):
        from .errors import InputError

        raise InputError(f"horizon: expected a number of days >= 0, got {horizon_days!r}")
    full = caseload.timelines
    timelines, kept = full.until(float(as_of_day))
    if callback:
        callback(0.1)
    timelines, kept_now, result, unscorable = split_unscorable(caseload, model, timelines, kept, as_of_day)
    if callback:
        callback(0.5)
    n_stages = model.n_stages
    if timelines.n_cases == 0:
        empty = np.zeros((0, n_stages))
        zeros = np.zeros(0)
        ints = np.zeros(0, dtype=np.int64)
        return CaseloadScores(
            dt.date.fromordinal(EPOCH.toordinal() + as_of_day), as_of_day, float(horizon_days), model, model_version,
            np.zeros(0, dtype=object), np.zeros(0, dtype=object), ints, ints, ints, ints, ints, empty, ints, empty,
            empty, zeros, zeros, np.zeros((0, model.n_covariates)), zeros, caseload, timelines,
            p_at_last_contact=empty, unscorable=unscorable)
    p_now = stage_probabilities_now(model, timelines, float(as_of_day), filtered=result.filtered)
    last = timelines.last_index
    last_covariates = timelines.covariates[last]
    ahead = forecast(model, p_now, last_covariates, float(horizon_days))
    follow_up = model.follow_up_mask
    if follow_up.any():
        p_follow_up_now = p_now[:, follow_up].sum(axis=1)
        p_reach_follow_up = reach_probability(model, p_now, last_covariates, float(horizon_days), follow_up)
    else:
        p_follow_up_now = np.zeros(timelines.n_cases)
        p_reach_follow_up = np.zeros(timelines.n_cases)
    if callback:
        callback(0.9)
    last_day = timelines.times[last].astype(np.int64)
    return CaseloadScores(
        as_of=from_day(as_of_day),
        as_of_day=int(as_of_day),
        horizon_days=float(horizon_days),
        model=model,
        model_version=model_version,
        case_ids=np.asarray(caseload.case_ids)[kept_now],
        coordinators=np.asarray(caseload.coordinators)[kept_now],
        case_rows=kept_now,
        first_contact_day=timelines.times[timelines.first_index].astype(np.int64),
        last_contact_day=last_day,
        days_since_contact=int(as_of_day) - last_day,
        n_contacts=timelines.n_contacts_per_case,
        p_now=p_now,
        most_likely_stage=np.argmax(p_now, axis=1),
        p_at_horizon=ahead.at_horizon,
        p_reach=ahead.reach,
        p_follow_up_now=np.clip(p_follow_up_now, 0.0, 1.0),
        p_reach_follow_up=np.clip(p_reach_follow_up, 0.0, 1.0),
        last_covariates=last_covariates,
        log_likelihood=result.log_likelihood,
        caseload=caseload,
        timelines=timelines,
        p_at_last_contact=result.filtered[last],
        unscorable=unscorable,
    )


def score_caseload(workspace, as_of: dt.date, horizon_days: float = 90.0, model: StageModel | None = None,
                   callback=None, include_closed: bool = False) -> CaseloadScores:
    """Load the workspace's timelines up to ``as_of`` and score them with the current model.

    Cases closed on or before ``as_of`` are left out unless ``include_closed``
    (:meth:`caseview.storage.Workspace.open_case_mask` decides which are open).
    """
    version_id = None
    if model is None:
        model, version = workspace.current_model()
        version_id = version.id
    as_of_day = to_day(as_of)
    caseload = workspace.load_caseload(model, as_of_day=as_of_day)
    if not include_closed:
        from .storage.caseload import subset_caseload

        caseload = subset_caseload(caseload, workspace.open_case_mask(caseload.case_ids, as_of_day))
    if callback:
        callback(0.05)
    scores = score_loaded(caseload, model, as_of_day, horizon_days, model_version=version_id, callback=callback)
    if include_closed:
        is_open = np.asarray(workspace.open_case_mask(list(scores.case_ids), as_of_day), dtype=bool)
        scores = replace(scores, is_closed=~is_open)
    return scores
