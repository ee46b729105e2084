"""Score a caseload: stage probabilities now, at the horizon, and the chance of reaching each stage.

This is glue between the workspace (storage) and the engine (``hmm``): it loads the timelines up
to the as-of date, runs the batched filter, propagates each case from its last contact to the
as-of date, and forecasts to the horizon. Every number it returns is advisory.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from hmm import StageModel, Timelines
from hmm.forecasting import forecast, reach_probability, stage_probabilities_now
from hmm.inference import forward

EPOCH = dt.date(1970, 1, 1)


def to_day(date: dt.date) -> int:
    """Days since 1970-01-01."""
    return (date - EPOCH).days


def from_day(day: int) -> dt.date:
    return EPOCH + dt.timedelta(days=int(day))


def parse_date(text: str, what: str = "date") -> dt.date:
    """Parse an ISO 8601 calendar date (YYYY-MM-DD) or raise InputError naming ``what``."""
    from .errors import InputError

    try:
        if len(text) != 10:
            raise ValueError
        return dt.date.fromisoformat(text)
    except (TypeError, ValueError):
        raise InputError(f"{what}: expected a date as YYYY-MM-DD, got {text!r}") from None


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
    caseload: object
    timelines: Timelines
    p_at_last_contact: np.ndarray | None = None

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


def score_loaded(caseload, model: StageModel, as_of_day: int, horizon_days: float = 90.0,
                 model_version: int | None = None, callback=None) -> CaseloadScores:
    """Score an already loaded caseload (no database access).

    ``caseload`` is a :class:`caseview.storage.Caseload`; only its contacts on or before
    ``as_of_day`` are used and only cases whose first contact is on or before it are scored.
    """
    if horizon_days < 0 or not np.isfinite(horizon_days):
        from .errors import InputError

        raise InputError(f"horizon: expected a number of days >= 0, got {horizon_days!r}")
    full = caseload.timelines
    timelines, kept = full.until(float(as_of_day))
    if callback:
        callback(0.1)
    n_stages = model.n_stages
    if timelines.n_cases == 0:
        empty = np.zeros((0, n_stages))
        zeros = np.zeros(0)
        ints = np.zeros(0, dtype=np.int64)
        return CaseloadScores(
            dt.date.fromordinal(EPOCH.toordinal() + as_of_day), as_of_day, float(horizon_days), model, model_version,
            np.zeros(0, dtype=object), np.zeros(0, dtype=object), ints, ints, ints, ints, ints, empty, ints, empty,
            empty, zeros, zeros, np.zeros((0, model.n_covariates)), zeros, caseload, timelines)
    result = forward(model, timelines)
    if callback:
        callback(0.5)
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
        case_ids=np.asarray(caseload.case_ids)[kept],
        coordinators=np.asarray(caseload.coordinators)[kept],
        case_rows=kept,
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
    )


def score_caseload(workspace, as_of: dt.date, horizon_days: float = 90.0, model: StageModel | None = None,
                   callback=None) -> CaseloadScores:
    """Load the workspace's timelines up to ``as_of`` and score them with the current model."""
    version_id = None
    if model is None:
        model, version = workspace.current_model()
        version_id = version.id
    as_of_day = to_day(as_of)
    caseload = workspace.load_caseload(model, as_of_day=as_of_day)
    if callback:
        callback(0.05)
    return score_loaded(caseload, model, as_of_day, horizon_days, model_version=version_id, callback=callback)
