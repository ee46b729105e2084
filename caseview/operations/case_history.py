"""One case's history: smoothed stage probabilities and the most likely path at each contact.

Both faces call this module: ``caseview history`` through :func:`case_history` (one case read from the
workspace by its key), the window's case view through :func:`case_chart_data` (a case of the caseload
it already scored, plus the estimate carried to the as-of date, the forecast and the what-if). The
smoothing and the path of a case come from one function, :func:`smoothed_history`, so the two faces
cannot disagree. Everything here is advisory: the path is an estimate, not a record.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from hmm import StageModel, Timelines

    from caseview.followup.whatif import WhatIf

__all__ = ["CaseHistory", "CaseChartData", "smoothed_history", "case_history", "case_chart_data"]


def smoothed_history(model: StageModel, timelines: Timelines) -> tuple:
    """Smoothed probabilities and the most likely path of ONE case, or why it cannot be scored.

    Parameters
    ----------
    model : hmm.StageModel
    timelines : hmm.Timelines
        Exactly one case, k contacts.

    Returns
    -------
    smoothed : ndarray, shape (k, n_stages)
        P(stage at contact | all the case's evidence); NaN rows when the case cannot be scored.
    path : ndarray of int, shape (k,), or None
        Most likely stage sequence (Viterbi); None when the case cannot be scored.
    reason : str
        '' when scored, else why not (covariates outside the model's range, impossible records ...).
    """
    from hmm.inference import forward, most_likely_path, smoothed_probabilities

    from caseview.case_checks import IMPOSSIBLE_REASON, unscorable_reasons

    reason = unscorable_reasons(model, timelines)[0]
    if not reason:
        result = forward(model, timelines)
        reason = "" if result.finite[0] else IMPOSSIBLE_REASON
    if reason:
        return np.full((timelines.n_contacts, model.n_stages), np.nan), None, reason
    smoothed = smoothed_probabilities(model, timelines, forward_result=result)
    return smoothed, most_likely_path(model, timelines, forward_result=result), ""


@dataclass(frozen=True)
class CaseHistory:
    """One case's contacts with what the model makes of them (``caseview history``).

    Attributes
    ----------
    case_id : str
    model : hmm.StageModel
    version_id : int
        The model version used.
    contact_days : ndarray of int64, shape (k,)
        Days since 1970-01-01.
    raw_values : dict[str, ndarray of object, shape (k,)]
        Recorded text per channel (and ``stage_known`` when recorded).
    covariates : ndarray, shape (k, n_covariates)
    smoothed : ndarray, shape (k, n_stages)
        NaN rows when the case cannot be scored.
    path : ndarray of int, shape (k,), or None
    reason : str
        '' when scored, else why not.
    """

    case_id: str
    model: StageModel
    version_id: int
    contact_days: np.ndarray
    raw_values: dict
    covariates: np.ndarray
    smoothed: np.ndarray
    path: np.ndarray | None
    reason: str

    @property
    def n_contacts(self) -> int:
        return int(self.contact_days.shape[0])


def case_history(ws, case_id: str, as_of_day: int | None = None) -> CaseHistory:
    """The history of one case of ``ws`` with the current model (contacts up to ``as_of_day`` when given).

    Raises
    ------
    InputError
        No such case, or no contact on or before ``as_of_day``.
    """
    from caseview.dates import day_text
    from caseview.errors import InputError

    case_id = ws.find_case(case_id)
    model, version = ws.current_model()
    one = ws.load_case(model, case_id, as_of_day=as_of_day)
    if one.n_cases == 0:
        when = "" if as_of_day is None else f" on or before {day_text(as_of_day)}"
        raise InputError(f"case {case_id}: no contact{when} in {ws.path}")
    smoothed, path, reason = smoothed_history(model, one.timelines)
    return CaseHistory(case_id, model, version.id, one.contact_days, one.raw_values, one.timelines.covariates,
                       smoothed, path, reason)


@dataclass(frozen=True)
class CaseChartData:
    """Arrays for one case's chart in the window.

    Attributes
    ----------
    case_id : str
    stages : tuple[str, ...]
    follow_up : ndarray of bool, shape (n_stages,)
    contact_days : ndarray of int64, shape (k,)       days since 1970-01-01
    smoothed : ndarray, shape (k, n_stages)  P(stage at contact | all evidence)
    path : ndarray of int, shape (k,)        most likely stage at each contact
    raw : list[dict[str, str]]               recorded values per contact (channel -> text)
    covariates : ndarray, shape (k, n_covariates)
    now_days : ndarray, shape (T1,)          last contact -> as-of date
    now : ndarray, shape (T1, n_stages)
    ahead_days : ndarray, shape (T2,)        as-of date -> horizon
    ahead : ndarray, shape (T2, n_stages)
    spread : ndarray, shape (T1 + T2,)       normalised entropy (0 = certain, 1 = no information)
    whatif : ndarray or None, shape (T2, n_stages)
    whatif_changes : dict[str, float]
    as_of_day : int
    horizon_days : float
    whatif_forecast : caseview.followup.whatif.WhatIf or None
        The same numbers as ``caseview forecast --set``.
    """

    case_id: str
    stages: tuple
    follow_up: np.ndarray
    contact_days: np.ndarray
    smoothed: np.ndarray
    path: np.ndarray
    raw: list
    covariates: np.ndarray
    now_days: np.ndarray
    now: np.ndarray
    ahead_days: np.ndarray
    ahead: np.ndarray
    spread: np.ndarray
    whatif: np.ndarray | None
    whatif_changes: dict
    as_of_day: int
    horizon_days: float
    whatif_forecast: WhatIf | None = None

    @property
    def follow_up_at_horizon(self) -> float:
        """P(in a follow-up stage on the horizon day) read from the forecast curve (occupancy; not
        "reach", which means at least once within the horizon)."""
        return float(self.ahead[-1, self.follow_up].sum()) if self.follow_up.any() else 0.0

    @property
    def whatif_follow_up_at_horizon(self) -> float | None:
        """As :attr:`follow_up_at_horizon`, with the what-if's covariates (None without a what-if)."""
        if self.whatif is None or not self.follow_up.any():
            return None
        return float(self.whatif[-1, self.follow_up].sum())


def _entropy(p: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        h = -np.where(p > 0, p * np.log(p), 0.0).sum(axis=-1)
    return h / np.log(p.shape[-1])


def case_chart_data(scores, row: int, changes: dict | None = None, n_points: int = 40) -> CaseChartData:
    """Chart arrays for scores row ``row``; ``changes`` = {covariate name: value} for the what-if."""
    from hmm.forecasting import occupancy_over_time
    from hmm.inference import forward

    model = scores.model
    one = scores.timelines.subset(np.array([row]))
    smoothed, path, _ = smoothed_history(model, one)   # a scored row: always scorable
    result = forward(model, one)
    last = one.last_index[0]
    filtered_last = result.filtered[last][None, :]
    covariates_last = one.covariates[last][None, :]
    last_day = float(one.times[last])
    as_of_day = int(scores.as_of_day)
    horizon = float(scores.horizon_days)
    gap = max(0.0, as_of_day - last_day)
    now_offsets = np.linspace(0.0, gap, max(2, n_points // 2))
    ahead_offsets = np.linspace(0.0, horizon, n_points)
    now = occupancy_over_time(model, filtered_last, covariates_last, now_offsets)[0]
    p_now = now[-1][None, :]
    ahead = occupancy_over_time(model, p_now, covariates_last, ahead_offsets)[0]
    whatif, forecast_pair = None, None
    changes = dict(changes or {})
    if changes:
        from caseview.followup.whatif import changed_covariates, check_changes, whatif_forecast

        changes = check_changes(changes, model)
        whatif = occupancy_over_time(model, p_now, changed_covariates(covariates_last, model, changes),
                                     ahead_offsets)[0]
        # the summary numbers from the one what-if function the command line uses too
        forecast_pair = whatif_forecast(scores, str(scores.case_ids[row]), changes=changes)
    caseload = scores.caseload
    case_row = int(scores.case_rows[row])
    full = caseload.timelines
    start = int(full.offsets[case_row])
    rows = np.arange(start, start + one.n_contacts)
    raw = [{name: str(values[r]) for name, values in caseload.raw_values.items()} for r in rows]
    return CaseChartData(
        case_id=str(scores.case_ids[row]), stages=tuple(model.stages), follow_up=model.follow_up_mask,
        contact_days=one.times.astype(np.int64), smoothed=smoothed, path=path, raw=raw,
        covariates=one.covariates, now_days=last_day + now_offsets, now=now,
        ahead_days=as_of_day + ahead_offsets, ahead=ahead,
        spread=np.concatenate([_entropy(now), _entropy(ahead)]), whatif=whatif, whatif_changes=changes,
        as_of_day=as_of_day, horizon_days=horizon, whatif_forecast=forecast_pair)
