"""Where to invest a limited number of places: rank cases by how much a change would lower their risk.

For each candidate case, the what-if forecast (:mod:`caseview.followup.whatif`: the same stage
probabilities now, the changed covariates from the as-of date on) gives the probability of
reaching a follow-up stage within the horizon with and without the change; the reduction is the
difference. Enrolling a set of cases averts, in expectation, the sum of their reductions (cases
kept from reaching a follow-up stage within the horizon), since each case's outcome depends only
on its own covariates. Three ways of filling N places are compared:

* by benefit: the N largest reductions (the ranking written out);
* by risk: the N highest probabilities of reaching a follow-up stage without the change;
* at random: N cases drawn without replacement, repeated with a seeded generator; the mean and
  the 2.5% and 97.5% points over the draws.

The ranking is a statistical estimate for planning, not a decision about any person's care.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from hmm.forecasting import reach_probability
from hmm.random_state import random_generator

from .whatif import changed_covariates, check_changes

RANDOM_DRAWS = 2000
PLANNING_NOTE = ("The ranking is a statistical estimate for planning, not a decision about any person's care; "
                 "decisions stay with the team and licensed clinicians.")


@dataclass(frozen=True)
class Targeting:
    """The ranked places and the three-way comparison.

    Attributes
    ----------
    case_ids, coordinators : ndarray of str, shape (n_ranked,)
        The chosen cases, largest reduction first (n_ranked = min(places, pool size)).
    p_reach_without, p_reach_with, reduction : ndarray, shape (n_ranked,)
    averted_by_benefit, averted_by_risk : float
        Expected cases kept from reaching a follow-up stage within the horizon.
    averted_at_random : tuple of float
        ``(mean, lower_95, upper_95)`` over :data:`RANDOM_DRAWS` seeded random choices.
    expected_reaching : float
        Expected number of pool cases reaching a follow-up stage within the horizon without the change.
    """

    as_of: dt.date
    horizon_days: float
    changes: dict
    among: str
    places: int
    pool_size: int
    case_ids: np.ndarray
    coordinators: np.ndarray
    p_reach_without: np.ndarray
    p_reach_with: np.ndarray
    reduction: np.ndarray
    averted_by_benefit: float
    averted_by_risk: float
    averted_at_random: tuple
    expected_reaching: float
    seed: int
    n_random_draws: int
    n_left_out: int

    @property
    def n_ranked(self) -> int:
        return int(self.case_ids.size)


def reach_without_and_with(model, p_now, covariates, changes: dict, horizon_days: float) -> tuple:
    """P(reach a follow-up stage within the horizon) without and with ``changes``, each shape (n,).

    Parameters
    ----------
    p_now : ndarray, shape (n, n_stages)
    covariates : ndarray, shape (n, n_covariates)
        The last recorded covariates (kept in the forecast without the change).
    """
    mask = model.follow_up_mask
    if not mask.any():
        zeros = np.zeros(p_now.shape[0])
        return zeros, zeros.copy()
    changes = check_changes(changes, model)
    after = changed_covariates(covariates, model, changes)
    both = reach_probability(model, np.concatenate([p_now, p_now]), np.concatenate([covariates, after]),
                             horizon_days, mask)
    return both[:p_now.shape[0]], both[p_now.shape[0]:]


def _top(values: np.ndarray, tie_break: np.ndarray, places: int) -> np.ndarray:
    """Indices of the ``places`` largest ``values`` (ties by ``tie_break`` ascending), largest first."""
    order = np.lexsort((tie_break, -values))
    return order[:places]


def random_choices(reduction: np.ndarray, places: int, rng: np.random.Generator, draws: int = RANDOM_DRAWS) -> tuple:
    """``(mean, lower_95, upper_95)`` of the summed reduction of ``places`` cases drawn at random."""
    n = reduction.size
    places = min(places, n)
    if places == 0:
        return 0.0, 0.0, 0.0
    totals = np.array([reduction[rng.choice(n, places, replace=False)].sum() for _ in range(draws)])
    return float(totals.mean()), float(np.quantile(totals, 0.025)), float(np.quantile(totals, 0.975))


def rank_places(scores, pool: np.ndarray, changes: dict, places: int, horizon_days: float, among: str,
                seed, n_left_out: int = 0) -> Targeting:
    """Rank the cases in ``pool`` (rows of ``scores``) and compare the three ways of filling the places.

    ``seed`` (int, Generator or None for fresh entropy) drives the random-choice comparison only.
    """
    model = scores.model
    without, with_change = reach_without_and_with(model, scores.p_now[pool], scores.last_covariates[pool],
                                                  changes, horizon_days)
    reduction = without - with_change
    ids = np.asarray(scores.case_ids)[pool].astype(str)
    chosen = _top(reduction, ids, places)
    by_risk = _top(without, ids, places)
    rng = random_generator(seed)
    return Targeting(scores.as_of, float(horizon_days), dict(changes), among, int(places), int(pool.size), ids[chosen],
                     np.asarray(scores.coordinators)[pool][chosen].astype(str), without[chosen], with_change[chosen],
                     reduction[chosen], float(reduction[chosen].sum()), float(reduction[by_risk].sum()),
                     random_choices(reduction, places, rng), float(without.sum()), int(seed), RANDOM_DRAWS,
                     int(n_left_out))
