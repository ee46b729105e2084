"""Stage probabilities now and ahead: carried forward to a day, at a horizon, reached within it.

Everything here carries stage probabilities forward in time with ``P(gap) = expm(Q gap)``,
starting from the forward pass (:mod:`hmm.inference`) at each case's last contact:

* :func:`stage_probabilities_now` - the filtered distribution at the last contact, carried to a day.
* :func:`forecast` - occupancy at a horizon and the probability of reaching each stage within it.
* :func:`reach_probability` - the probability of reaching any of a set of stages within a horizon.
* :func:`occupancy_over_time` - occupancy on several future days (for charts).

Conventions
-----------
* The covariates given (for :func:`stage_probabilities_now`, those of the last contact) are
  assumed to hold over the whole gap or horizon.
* With the model's ``unscheduled_contacts`` block, "now" uses ``expm((Q - Lambda) gap)``
  renormalised (nobody has called since the last contact); forecasts beyond the as-of date use Q
  alone (future contacts are not conditioned on).
* Reaching a stage (or a set of stages) is a first passage: the target row(s) of Q are set to zero
  so the target becomes absorbing, and the probability in the target at the horizon is read off.
* Transition matrices are computed once per distinct (covariate row, gap) pair
  (:func:`hmm.transition.distinct_transition_matrices`).
* A case whose covariates make a rate overflow (:meth:`hmm.StageModel.usable_covariate_rows`)
  gets nan rows; the other cases are computed as usual.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .inference import forward
from .model import StageModel
from .timelines import Timelines
from .transition import covariate_groups, distinct_transition_matrices

__all__ = ["Forecast", "stage_probabilities_now", "forecast", "reach_probability", "occupancy_over_time"]


def _generators(model: StageModel, distinct: np.ndarray) -> tuple:
    """Generators of the distinct covariate rows, and which rows are usable, shape (g,).

    A row whose rates overflow (:meth:`StageModel.usable_covariate_rows`) gets a zero generator
    as a placeholder; callers set the results of the cases using it to nan, so one case's
    numerical failure never stops the others.
    """
    with np.errstate(over="ignore", invalid="ignore"):
        generators = model.generators(distinct)
    usable = model.usable_covariate_rows(distinct)
    if not usable.all():
        generators[~usable] = 0.0
    return generators, usable


def _propagate(model: StageModel, probabilities: np.ndarray, covariates: np.ndarray, gaps: np.ndarray,
               rate_rows_zeroed: np.ndarray | None = None, quiet: bool = False) -> np.ndarray:
    """``p_i P_i(gap_i)`` with P from each row's covariates, optionally with some rows of Q zeroed.

    With ``quiet`` the generator is ``Q - Lambda`` (no unscheduled contact during the gap) and the
    result is renormalised: the stage distribution given that nobody called. Rows whose rates
    overflow give nan (see :func:`_generators`).
    """
    rows = np.asarray(covariates, dtype=float).reshape(probabilities.shape[0], model.n_covariates)
    distinct, group = covariate_groups(rows)
    generators, usable = _generators(model, distinct)
    if quiet:
        with np.errstate(over="ignore", invalid="ignore"):
            generators = model.quiet_generators(distinct)
        if not usable.all():
            generators[~usable] = 0.0
    if rate_rows_zeroed is not None:
        generators = generators.copy()
        generators[:, rate_rows_zeroed, :] = 0.0
    matrices, index = distinct_transition_matrices(generators, gaps, group, sub_generators=quiet)
    result = np.einsum("ns,nst->nt", probabilities, matrices[index])
    if quiet:
        total = result.sum(axis=1, keepdims=True)
        result = result / np.where(total > 0, total, 1.0)
    if not usable.all():
        result[~usable[group]] = np.nan
    return result


def _propagate_variants(model: StageModel, probabilities: np.ndarray, covariates: np.ndarray, gaps: np.ndarray,
                        zeroed: list) -> list:
    """:func:`_propagate` for several choices of zeroed generator rows, with one matrix computation.

    ``zeroed[v]`` is None or the rows of Q zeroed in variant ``v``. Every variant's matrices come
    from one call of :func:`distinct_transition_matrices` (one ``scipy.linalg.expm`` for all the
    generators that need it instead of one per variant); each matrix is the same as in a separate call.
    """
    n = probabilities.shape[0]
    distinct, group = covariate_groups(np.asarray(covariates, dtype=float).reshape(n, model.n_covariates))
    base, usable = _generators(model, distinct)
    stacked = []
    for rows in zeroed:
        generators = base.copy()
        if rows is not None:
            generators[:, rows, :] = 0.0
        stacked.append(generators)
    n_groups = base.shape[0]
    generator_index = (np.arange(len(zeroed))[:, None] * n_groups + group[None, :]).reshape(-1)
    matrices, index = distinct_transition_matrices(np.concatenate(stacked), np.tile(gaps, len(zeroed)),
                                                   generator_index)
    index = index.reshape(len(zeroed), n)
    results = [np.einsum("ns,nst->nt", probabilities, matrices[index[v]]) for v in range(len(zeroed))]
    if not usable.all():
        for result in results:
            result[~usable[group]] = np.nan
    return results


def stage_probabilities_now(model: StageModel, timelines: Timelines, as_of, filtered: np.ndarray | None = None):
    """Stage probabilities of each case on a given day, from the evidence up to that day.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
        Already cut to contacts on or before ``as_of`` (:meth:`Timelines.until`).
    as_of : float or ndarray, shape (n_cases,)
        Day (same origin as ``timelines.times``), not before any case's last contact.
    filtered : ndarray, shape (n_contacts, n_stages), optional
        ``forward(model, timelines).filtered`` if already computed.

    Returns
    -------
    ndarray, shape (n_cases, n_stages)
        Filtered distribution at the last contact, propagated to ``as_of`` with the generator of
        the last contact's covariates. With ``model.unscheduled_contacts`` the generator is
        ``Q - Lambda`` and the result renormalised: the quiet time since the last contact (no
        unscheduled contact recorded) is evidence too.
    """
    if filtered is None:
        filtered = forward(model, timelines).filtered
    last = timelines.last_index
    gaps = np.broadcast_to(np.asarray(as_of, dtype=float), last.shape) - timelines.times[last]
    if np.any(gaps < 0):
        case = int(np.flatnonzero(gaps < 0)[0])
        raise ValueError(f"as_of is before the last contact of case {case} "
                         f"(day {timelines.times[last][case]:g}); cut the timelines with Timelines.until first")
    return _propagate(model, filtered[last], timelines.covariates[last], gaps,
                      quiet=model.unscheduled_contacts is not None)


@dataclass
class Forecast:
    """Where cases will be after a horizon.

    Attributes
    ----------
    at_horizon : ndarray, shape (n_cases, n_stages)
        P(stage at the horizon).
    reach : ndarray, shape (n_cases, n_stages)
        P(in that stage at least once within [0, horizon]); at least the current probability.
    horizon : float
    """

    at_horizon: np.ndarray
    reach: np.ndarray
    horizon: float


def _check_horizon(horizon) -> float:
    horizon = float(horizon)
    if not np.isfinite(horizon) or horizon < 0:
        raise ValueError(f"horizon must be a number of days >= 0, got {horizon!r}")
    return horizon


def forecast(model: StageModel, probabilities, covariates, horizon: float) -> Forecast:
    """Stage occupancy at a horizon and probability of reaching each stage within it.

    Parameters
    ----------
    model : StageModel
    probabilities : ndarray, shape (n_cases, n_stages)
        Current stage probabilities (for example :func:`stage_probabilities_now`).
    covariates : ndarray, shape (n_cases, n_covariates)
        Covariates assumed to hold over the horizon.
    horizon : float
        Days ahead, >= 0.

    Returns
    -------
    Forecast
        ``reach[:, s]`` makes stage ``s`` absorbing (its row of Q set to zero), propagates, and
        reads column ``s``: the first-passage probability into ``s`` by the horizon.
    """
    probabilities = np.atleast_2d(np.asarray(probabilities, dtype=float))
    horizon = _check_horizon(horizon)
    n = probabilities.shape[0]
    gaps = np.full(n, horizon)
    # occupancy, then one variant per stage made absorbing; all matrices in one computation
    ahead = _propagate_variants(model, probabilities, covariates, gaps,
                                [None] + [np.array([s]) for s in range(model.n_stages)])
    at_horizon = ahead[0]
    reach = np.empty_like(probabilities)
    for s in range(model.n_stages):
        reach[:, s] = ahead[1 + s][:, s]
    return Forecast(at_horizon, np.clip(reach, 0.0, 1.0), horizon)


def reach_probability(model: StageModel, probabilities, covariates, horizon: float, target_mask) -> np.ndarray:
    """Probability of being in any of a set of stages at least once within a horizon.

    Parameters
    ----------
    model : StageModel
    probabilities : ndarray, shape (n_cases, n_stages)
    covariates : ndarray, shape (n_cases, n_covariates)
    horizon : float
        Days, >= 0.
    target_mask : ndarray of bool, shape (n_stages,)
        The set of stages (for example ``model.follow_up_mask``); all made absorbing together.

    Returns
    -------
    ndarray, shape (n_cases,)
    """
    probabilities = np.atleast_2d(np.asarray(probabilities, dtype=float))
    target = np.asarray(target_mask, dtype=bool)
    if target.shape != (model.n_stages,):
        raise ValueError(f"target_mask must have {model.n_stages} entries, got {target.shape}")
    gaps = np.full(probabilities.shape[0], _check_horizon(horizon))
    ahead = _propagate(model, probabilities, covariates, gaps, np.flatnonzero(target))
    return np.clip(ahead[:, target].sum(axis=1), 0.0, 1.0)


def occupancy_over_time(model: StageModel, probabilities, covariates, days) -> np.ndarray:
    """Stage probabilities on several future days (for charts).

    Parameters
    ----------
    model : StageModel
    probabilities : ndarray, shape (n_cases, n_stages)
    covariates : ndarray, shape (n_cases, n_covariates)
    days : ndarray, shape (T,)
        Offsets from now in days, >= 0.

    Returns
    -------
    ndarray, shape (n_cases, T, n_stages)
    """
    probabilities = np.atleast_2d(np.asarray(probabilities, dtype=float))
    days = np.asarray(days, dtype=float).reshape(-1)
    if days.size and (not np.all(np.isfinite(days)) or days.min() < 0):
        raise ValueError("days must be offsets >= 0")
    n = probabilities.shape[0]
    distinct, group = covariate_groups(np.asarray(covariates, dtype=float).reshape(n, model.n_covariates))
    generators, usable = _generators(model, distinct)
    all_groups = np.repeat(np.arange(distinct.shape[0]), days.size)
    all_days = np.tile(days, distinct.shape[0])
    matrices = distinct_transition_matrices(generators, all_days, all_groups)
    table = matrices[0][matrices[1]].reshape(distinct.shape[0], days.size, model.n_stages, model.n_stages)
    result = np.empty((n, days.size, model.n_stages))
    chunk = max(1, 2_000_000 // max(1, days.size * model.n_stages ** 2))  # bounds the gathered memory
    for start in range(0, n, chunk):
        part = slice(start, start + chunk)
        result[part] = np.einsum("ns,ntsu->ntu", probabilities[part], table[group[part]])
    if not usable.all():
        result[~usable[group]] = np.nan
    return result
