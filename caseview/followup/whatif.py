"""What-if forecasts: the same case (or caseload) with some covariates changed from now on.

The stage probabilities now are those of the recorded history; only the forecast from the
as-of date forward uses the changed covariate values (for example ``balance_programme = 1``:
"what if this client enrolled today?"). The unchanged forecast uses the last recorded values.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np

from caseview.errors import InputError
from hmm.forecasting import forecast, reach_probability
from hmm.model import MAX_RATE_PER_DAY

from .rules import RuleSet, default_rules


@dataclass(frozen=True)
class StageForecast:
    """Forecast of one case, one row per stage: ndarrays of shape (n_stages,)."""

    p_now: np.ndarray
    p_at_horizon: np.ndarray
    p_reach: np.ndarray
    p_follow_up_at_horizon: float
    p_reach_follow_up: float
    covariates: dict


@dataclass(frozen=True)
class WhatIf:
    """Side-by-side forecast of one case."""

    case_id: str
    as_of: dt.date
    horizon_days: float
    stages: tuple
    unchanged: StageForecast
    changed: StageForecast
    changes: dict


@dataclass(frozen=True)
class CaseloadWhatIf:
    """How many cases would be flagged at the horizon, with and without the change.

    "Flagged at the horizon" = P(follow-up stage at the horizon) >= the ``in_follow_up_now``
    threshold; "reaching" = P(reach a follow-up stage within the horizon) >= the
    ``likely_to_reach_follow_up`` threshold.
    """

    n_cases: int
    horizon_days: float
    changes: dict
    flagged_at_horizon_without: int
    flagged_at_horizon_with: int
    reaching_without: int
    reaching_with: int
    flagged_without: np.ndarray
    flagged_with: np.ndarray


def parse_changes(assignments, model) -> dict:
    """``["NAME=VALUE", ...]`` -> {covariate: float}, validated against the model's covariates."""
    changes = {}
    for text in assignments or ():
        name, sep, value = str(text).partition("=")
        name = name.strip()
        if not sep or not name:
            raise InputError(f"change {text!r}: expected NAME=VALUE, for example balance_programme=1")
        try:
            changes[name] = float(value)
        except ValueError:
            raise InputError(f"change {text!r}: expected a number after '=', got {value.strip()!r}") from None
    return check_changes(changes, model)


def check_changes(changes: dict, model) -> dict:
    """Validate covariate names and values; returns {name: float}."""
    out = {}
    for name, value in (changes or {}).items():
        if name not in model.covariates:
            raise InputError(f"covariate {name!r}: not in the model (covariates: "
                             f"{', '.join(model.covariates) or 'none'})")
        try:
            number = float(value)
        except (TypeError, ValueError):
            raise InputError(f"covariate {name}: expected a number, got {value!r}") from None
        if not math.isfinite(number):
            raise InputError(f"covariate {name}: expected a finite number, got {value!r}")
        bounds = model.range_of.get(name)
        from caseview.case_checks import covariate_range_problem, outside_range

        if bounds is not None and outside_range(number, *bounds):
            raise InputError(f"covariate {name} = {number:g}: {covariate_range_problem(name, *bounds)}")
        out[name] = number
    return out


def changed_covariates(covariates: np.ndarray, model, changes: dict) -> np.ndarray:
    """Copy of ``covariates`` (n, K) with the named columns set to the new values.

    Raises InputError when the new values make a transition rate overflow for some case (only
    possible for a covariate without a declared range; see ``hmm.model.MAX_RATE_PER_DAY``).
    """
    out = np.array(covariates, dtype=float, copy=True)
    for name, value in changes.items():
        out[:, model.covariates.index(name)] = value
    if changes and out.size and not model.usable_covariate_rows(out).all():
        text = ", ".join(f"{k}={v:g}" for k, v in changes.items())
        raise InputError(f"change {text}: these values make a transition rate overflow (above "
                         f"{MAX_RATE_PER_DAY:g} per day) for some case; choose values the model is meant for")
    return out


def _stage_forecast(model, p_now, covariates, horizon) -> StageForecast:
    ahead = forecast(model, p_now[None, :], covariates[None, :], horizon)
    mask = model.follow_up_mask
    reach_fu = float(reach_probability(model, p_now[None, :], covariates[None, :], horizon, mask)[0]) \
        if mask.any() else 0.0
    return StageForecast(p_now.copy(), ahead.at_horizon[0], ahead.reach[0],
                         float(ahead.at_horizon[0, mask].sum()), reach_fu,
                         dict(zip(model.covariates, map(float, covariates))))


def whatif_forecast(ws_or_scores, case_id: str, as_of: dt.date | None = None, horizon: float | None = None,
                    changes: dict | None = None) -> WhatIf:
    """Forecast one case with and without changed covariates.

    Parameters
    ----------
    ws_or_scores : Workspace or CaseloadScores
        A workspace is scored as of ``as_of`` with ``horizon`` (both required then); scores are
        used as they are (``as_of`` and ``horizon`` default to theirs).
    case_id : str
        As typed: read like an imported case ID (:func:`caseview.timeline_io.case_ids.match_case_id`).
    changes : dict[str, float]
        Covariate name -> value applied from the as-of date on.

    Raises
    ------
    InputError
        Unknown case (or no contact on or before the as-of date), unknown covariate, bad value.
    """
    from caseview.scoring import CaseloadScores, score_caseload

    if isinstance(ws_or_scores, CaseloadScores):
        scores = ws_or_scores
        if horizon is None:
            horizon = scores.horizon_days
        if scores.row_of(case_id) < 0:
            from caseview.timeline_io.case_ids import match_case_id

            case_id = match_case_id(case_id, scores.case_ids,
                                    f"the caseload with a contact on or before {scores.as_of.isoformat()}")
    else:
        if as_of is None:
            raise InputError("forecast: an as-of date is needed (YYYY-MM-DD)")
        case_id = ws_or_scores.find_case(case_id)
        scores = score_caseload(ws_or_scores, as_of, 90.0 if horizon is None else horizon)
        if horizon is None:
            horizon = scores.horizon_days
    horizon = float(horizon)
    if not math.isfinite(horizon) or horizon < 0:
        raise InputError(f"horizon: expected a number of days >= 0, got {horizon!r}")
    model = scores.model
    changes = check_changes(changes or {}, model)
    row = scores.row_of(case_id)
    if row < 0:
        reason = scores.unscorable.reason_of(case_id)
        if reason:
            from caseview.errors import CaseNotScored

            raise CaseNotScored(f"case {case_id!r} cannot be scored: {reason}")
        raise InputError(f"case {case_id!r}: no such case with a contact on or before {scores.as_of.isoformat()}")
    p_now = scores.p_now[row]
    base = scores.last_covariates[row]
    after = changed_covariates(base[None, :], model, changes)[0]
    return WhatIf(case_id, scores.as_of, horizon, tuple(model.stages),
                  _stage_forecast(model, p_now, base, horizon), _stage_forecast(model, p_now, after, horizon),
                  changes)


def caseload_whatif(scores, changes: dict, rules: RuleSet | None = None, cases=None) -> CaseloadWhatIf:
    """Counts of cases flagged at the horizon with and without applying ``changes`` to every case.

    Parameters
    ----------
    scores : CaseloadScores
    changes : dict[str, float]
    rules : RuleSet, optional
        Thresholds from ``in_follow_up_now`` and ``likely_to_reach_follow_up`` (defaults if None).
    cases : ndarray of bool or int, optional
        Apply the change only to these cases (default: all).
    """
    rules = rules or default_rules()
    model = scores.model
    changes = check_changes(changes, model)
    mask = model.follow_up_mask
    after = scores.last_covariates
    if changes:
        selected = np.zeros(scores.n_cases, dtype=bool)
        if cases is None:
            selected[:] = True
        else:
            selected[np.asarray(cases)] = True
        after = np.where(selected[:, None], changed_covariates(scores.last_covariates, model, changes),
                         scores.last_covariates)
    ahead = forecast(model, scores.p_now, after, scores.horizon_days)
    reach = reach_probability(model, scores.p_now, after, scores.horizon_days, mask) if mask.any() else \
        np.zeros(scores.n_cases)
    level = rules["in_follow_up_now"].threshold
    reach_level = rules["likely_to_reach_follow_up"].threshold
    without = scores.p_at_horizon[:, mask].sum(axis=1) >= level
    with_change = ahead.at_horizon[:, mask].sum(axis=1) >= level
    return CaseloadWhatIf(
        scores.n_cases, scores.horizon_days, changes, int(without.sum()), int(with_change.sum()),
        int((scores.p_reach_follow_up >= reach_level).sum()), int((reach >= reach_level).sum()),
        without, with_change)
