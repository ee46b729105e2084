"""Numbers behind the case chart, from the engine (no Qt here, no statistics of our own).

For one scored case: smoothed stage probabilities at its contacts, the most likely path
(Viterbi), the estimate carried from the last contact to the as-of date, the forecast to the
horizon, and optionally the forecast with changed covariates (what-if).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class CaseChartData:
    """Arrays for one case's chart.

    Attributes
    ----------
    stages : tuple[str, ...]
    follow_up : ndarray of bool, shape (n_stages,)
    contact_days : ndarray, shape (k,)       days since 1970-01-01
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
    as_of_day : int
    horizon_days : float
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
    whatif_forecast: object | None = None   # caseview.followup.whatif.WhatIf (same as `caseview forecast`)

    @property
    def follow_up_at_horizon(self) -> float:
        """P(in a follow-up stage on the horizon day) read from the forecast curve (occupancy; not
        "reach", which means at least once within the horizon)."""
        return float(self.ahead[-1, self.follow_up].sum()) if self.follow_up.any() else 0.0

    @property
    def whatif_follow_up(self) -> float | None:
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
    from hmm.inference import forward, most_likely_path, smoothed_probabilities

    model = scores.model
    one = scores.timelines.subset(np.array([row]))
    result = forward(model, one)
    smoothed = smoothed_probabilities(model, one, forward_result=result)
    path = most_likely_path(model, one)
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
