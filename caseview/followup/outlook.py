"""The caseload outlook: how many open cases will be in each stage at each coming month end.

Built from the individual forecasts: each open case's stage probabilities on the as-of date
(:mod:`caseview.scoring`, i.e. :func:`hmm.forecasting.stage_probabilities_now`) are moved on with
``expm(Q t)`` for that case's covariates, and summed (:mod:`caseview.followup.occupancy`).

* ``expected``: the sum over open cases (plus expected new referrals still in the stage).
* ``lower_95`` / ``upper_95``: the 2.5% and 97.5% points of the count. Given the parameters, the
  count is Poisson-binomial over the open cases plus Poisson for referrals
  (:mod:`caseview.followup.poisson_binomial`); with parameter uncertainty, the equal-weight
  mixture over models drawn from the fit's sampling distribution
  (:mod:`caseview.followup.parameter_draws`), each draw moving both the cases' stage probabilities
  now (:mod:`caseview.followup.now_draws`) and their forecast.
* ``entries_expected``: the expected number of entries into the stage during the month (from
  the previous month end, or the as-of date, to this one): moves from other stages plus new
  referrals starting in it. For the combined ``follow-up stages`` row, entries into the set from
  outside it (a move between two follow-up stages is not an entry).

Month ends are the last days of the calendar months after the as-of date (the as-of date's own
month end first, unless the as-of date is that day).
"""

from __future__ import annotations

import calendar
import copy
import datetime as dt
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from hmm.transition import covariate_groups

from .now_draws import NOW_SAMPLE_CASES, NowUnderDraws
from .occupancy import cell_columns, expected_entries, group_sums, occupancy_integrals, power_sums
from .poisson_binomial import (EXACT_BELOW_VARIANCE, CountDistributions, CountMoments, exact_pmf,
                               mixture_quantiles, moments_from_power_sums)
from .referrals import ReferralAssumption

if TYPE_CHECKING:
    from caseview.scoring import UnscorableCases

FOLLOW_UP_ROW = "follow-up stages"


@dataclass(frozen=True)
class OpenCases:
    """Which scored cases the outlook counts.

    Attributes
    ----------
    rows : ndarray of int, shape (n_open,)
        Rows of the scores.
    n_unscorable : int
        Cases left out because they cannot be scored (impossible or contradictory records).
    n_left_service : int
        Cases left out because their last contact records entry to an exact-entry stage (for
        example a recorded move to residential care).
    n_closed : int
        Cases left out because they are closed.
    """

    rows: np.ndarray
    n_unscorable: int
    n_left_service: int
    n_closed: int = 0


def open_case_rows(scores, coordinator: str | None = None) -> OpenCases:
    """The one place that decides which scored cases are open (and, optionally, one coordinator's).

    Left out: cases that cannot be scored (set aside by scoring in ``scores.unscorable``, or with
    stage probabilities that are not a distribution), cases whose last contact records entry to an
    exact-entry stage, and closed cases (scoring leaves closed cases out unless asked to include
    them; ``scores.is_closed`` marks them then).
    """
    p_now = np.asarray(scores.p_now, dtype=float)
    n = p_now.shape[0]
    mine = np.ones(n, dtype=bool) if coordinator is None else \
        np.asarray(scores.coordinators).astype(str) == str(coordinator)
    with np.errstate(invalid="ignore"):
        unscorable = ~np.isfinite(p_now).all(axis=1) | (np.abs(p_now.sum(axis=1) - 1.0) > 1e-6)
        unscorable |= ~np.isfinite(np.asarray(scores.log_likelihood, dtype=float))
    set_aside = scores.unscorable          # cases scoring could not score at all
    n_set_aside = 0
    if set_aside.n_cases:
        n_set_aside = int(set_aside.n_cases) if coordinator is None else \
            int(np.sum(np.asarray(set_aside.coordinators).astype(str) == str(coordinator)))
    closed = np.zeros(n, dtype=bool) if scores.is_closed is None else np.asarray(scores.is_closed, dtype=bool)
    left = np.zeros(n, dtype=bool)
    model = scores.model
    if n and model.exact_entry_stages:
        exact = np.isin(np.asarray(model.stages), list(model.exact_entry_stages))
        allowed = scores.timelines.allowed_stages[scores.timelines.last_index]
        left = allowed[:, exact].any(axis=1) & ~allowed[:, ~exact].any(axis=1)
    keep = ~unscorable & ~left & ~closed & mine
    return OpenCases(np.flatnonzero(keep), int((unscorable & mine).sum()) + n_set_aside,
                     int((left & ~unscorable & mine).sum()), int((closed & ~unscorable & ~left & mine).sum()))


def month_ends(as_of: dt.date, months: int) -> list:
    """The next ``months`` calendar month ends after ``as_of``."""
    out = []
    year, month = as_of.year, as_of.month
    while len(out) < months:
        end = dt.date(year, month, calendar.monthrange(year, month)[1])
        if end > as_of:
            out.append(end)
        year, month = (year + 1, 1) if month == 12 else (year, month + 1)
    return out


@dataclass(frozen=True)
class Outlook:
    """Expected counts with 95% bands, one row per month end and one column per stage (+ combined).

    Attributes
    ----------
    dates : tuple of datetime.date, length T
    rows : tuple of str, length S+1
        Stage names, then :data:`FOLLOW_UP_ROW`.
    expected, lower_95, upper_95, entries_expected : ndarray, shape (T, S+1)
    """

    as_of: dt.date
    dates: tuple
    rows: tuple
    expected: np.ndarray
    lower_95: np.ndarray
    upper_95: np.ndarray
    entries_expected: np.ndarray
    open_cases: OpenCases
    referrals: ReferralAssumption
    uncertainty: str
    n_draws: int
    seed: int | None
    coordinator: str | None
    model_version: int | None
    kept_fixed: tuple = ()
    not_scored: UnscorableCases | None = None     # the cases left out, with reasons
    now_rescored: int = 0         # open cases whose stage probabilities now were recomputed under each draw

    @property
    def n_open(self) -> int:
        return int(self.open_cases.rows.size)

    def bands_note(self) -> str:
        """One short phrase for the CSV's ``bands`` column: what the 95% band includes."""
        if self.uncertainty != "parameters":
            return "given the model; parameter uncertainty not included"
        who = ("every case" if self.now_rescored >= self.n_open
               else f"a stratified sample of {self.now_rescored} of {self.n_open} cases")
        return (f"mixture over {self.n_draws} parameter draws (seed {self.seed}); stage probabilities now "
                f"recomputed under each draw for {who}")

    def describe_uncertainty(self) -> str:
        base = ("Bands: 2.5% and 97.5% points of each count; given the model, a count is a sum of independent "
                "yes/no outcomes (Poisson-binomial, exact below variance 25, refined normal approximation "
                "above), plus Poisson for new referrals.")
        if self.uncertainty == "parameters":
            if self.now_rescored >= self.n_open:
                now = ("each case's stage probabilities now recomputed from its contacts under every drawn model, "
                       "so the bands cover where cases are now as well as where they go")
            else:
                now = (f"stage probabilities now recomputed under every drawn model for a random sample of "
                       f"{self.now_rescored:,} of the {self.n_open:,} open cases (stratified by covariates; the "
                       "other cases move by their group's average change), so the bands cover where cases are now "
                       "as well as where they go")
            return (base + f" Widened for parameter uncertainty: a mixture over {self.n_draws} models drawn "
                    f"(seed {self.seed}) from the fit's multivariate normal on all its free parameters (log rates, "
                    "log hazard ratios, logits of the check results and initial shares; inverse observed "
                    f"information); {now}."
                    + (f" Kept at their fitted values (no usable standard error): {', '.join(self.kept_fixed)}."
                       if self.kept_fixed else ""))
        return base + " Parameter uncertainty is not included."


@dataclass(frozen=True)
class _Parameters:
    """One parameter set: generators for the groups, initial distribution, referral rate per day."""

    generators: np.ndarray
    initial: np.ndarray
    rate_per_day: float


class _Caseload:
    """The open cases' probabilities arranged by covariate group, and the referral mix."""

    def __init__(self, p_now, covariates, referrals: ReferralAssumption, follow_up_mask):
        arrivals = np.asarray(referrals.covariates, dtype=float).reshape(-1, covariates.shape[1])
        rows, index = covariate_groups(np.concatenate([covariates, arrivals]))
        self.rows = rows
        self.group = index[:covariates.shape[0]]
        self.arrival_groups = index[covariates.shape[0]:]
        self.arrival_weights = np.asarray(referrals.weights, dtype=float)
        self.order = np.argsort(self.group, kind="stable")
        self.p_now = p_now
        self.bounds = np.searchsorted(self.group[self.order], np.arange(rows.shape[0] + 1))
        self.sums = group_sums(p_now, self.group, rows.shape[0])
        self.follow_up = np.asarray(follow_up_mask, dtype=bool)
        self._probabilities = lambda: p_now
        self._sorted = None

    @property
    def p_sorted(self) -> np.ndarray:
        """The open cases' probabilities now, ordered by covariate group, shape (n_open, S)."""
        if self._sorted is None:   # under a parameter draw: worked out when first needed (small counts)
            self._sorted = self._probabilities()[self.order]
        return self._sorted

    def under_draw(self, sums, probabilities) -> "_Caseload":
        """This caseload with its "now" moved by a parameter draw (:meth:`NowUnderDraws.under`)."""
        if sums is None:
            return self
        moved = copy.copy(self)
        moved.sums, moved._probabilities, moved._sorted = sums, probabilities, None
        return moved

    def case_probabilities(self, columns: np.ndarray, t: int, c: int) -> np.ndarray:
        """Each open case's probability for day index ``t`` and cell ``c``, shape (n_open,)."""
        parts = [self.p_sorted[self.bounds[g]:self.bounds[g + 1]] @ columns[g, t, :, c]
                 for g in range(self.rows.shape[0])]
        return np.concatenate(parts) if parts else np.zeros(0)


def _evaluate(caseload: _Caseload, parameters: _Parameters, days: np.ndarray, exact: bool = True) -> tuple:
    """Expected counts, entries, moments and exact distributions under one parameter set."""
    integrals = occupancy_integrals(parameters.generators, np.concatenate([[0.0], days]))
    columns = cell_columns(integrals.transition[:, 1:], caseload.follow_up)          # (G, T, S, C)
    s1, s2, s3 = power_sums(caseload.sums, columns)
    weights = np.zeros(caseload.rows.shape[0])
    np.add.at(weights, caseload.arrival_groups, caseload.arrival_weights)
    arrival_start = parameters.rate_per_day * weights[:, None] * parameters.initial[None, :]   # (G, S)
    arrival_mean = cell_columns(np.einsum("gr,gtrs->gts", arrival_start, integrals.first_integral[:, 1:])[..., None, :],
                                caseload.follow_up)[..., 0, :].sum(axis=0)        # (T, C)
    moments = moments_from_power_sums(s1, s2, s3, arrival_mean)
    # expected days in each stage during each month: existing cases (F1 differences) + referrals (F2)
    days_existing = np.einsum("gr,gtrs->gts", caseload.sums.first, np.diff(integrals.first_integral, axis=1))
    days_arrivals = np.einsum("gr,gtrs->gts", arrival_start, np.diff(integrals.second_integral, axis=1))
    entries = expected_entries(days_existing + days_arrivals, parameters.generators, caseload.follow_up)
    starting = np.diff(np.concatenate([[0.0], days]))[:, None] * arrival_start.sum(axis=0)[None, :]
    entries += np.concatenate([starting, starting[:, caseload.follow_up].sum(axis=1, keepdims=True)], axis=1)
    exact_cells = {}
    if exact:
        for t, c in zip(*np.nonzero(moments.variance < EXACT_BELOW_VARIANCE)):
            exact_cells[(int(t), int(c))] = exact_pmf(caseload.case_probabilities(columns, t, c), arrival_mean[t, c])
    return moments, entries, exact_cells


def _parameters(model, rows: np.ndarray, rate_per_day: float) -> _Parameters:
    return _Parameters(model.generators(rows), np.asarray(model.initial, dtype=float), float(rate_per_day))


def compute_outlook(scores, as_of: dt.date, months: int, referrals: ReferralAssumption, open_cases: OpenCases,
                    drawn=None, drawn_rates=None, seed=None, coordinator=None, callback=None,
                    now_sample: int | None = None, now_rng=None) -> Outlook:
    """The outlook of the open cases in ``scores`` (see the module docstring).

    Parameters
    ----------
    scores : caseview.scoring.CaseloadScores
    months : int
    referrals : ReferralAssumption
    open_cases : OpenCases
        From :func:`open_case_rows`.
    drawn : ParameterDraws, optional
        Parameter draws (:func:`caseview.followup.parameter_draws.draw_models`); None for none.
    drawn_rates : ndarray, shape (n_draws,), optional
        Referral rates per month for the draws.
    now_sample : int, optional
        Open cases rescored under each draw (:data:`caseview.followup.now_draws.NOW_SAMPLE_CASES`
        when None; 0 = every case).
    now_rng : numpy.random.Generator, optional
        Draws that sample (default: a generator seeded with ``seed``).
    callback : callable(fraction), optional
    """
    model = scores.model
    drawn_models = drawn.models if drawn is not None else None
    ends = month_ends(as_of, months)
    days = np.array([(d - as_of).days for d in ends], dtype=float)
    rows = open_cases.rows
    caseload = _Caseload(scores.p_now[rows], scores.last_covariates[rows], referrals, model.follow_up_mask)
    point = _parameters(model, caseload.rows, referrals.rate_per_day)
    moments, entries, exact_cells = _evaluate(caseload, point, days)
    if callback:
        callback(0.1)
    n_cells = moments.mean.shape
    if drawn_models:
        now = NowUnderDraws(scores.timelines, caseload.p_now, caseload.group, caseload.rows.shape[0],
                            scores.as_of_day, now_rng if now_rng is not None else np.random.default_rng(seed),
                            NOW_SAMPLE_CASES if now_sample is None else now_sample, rows=rows)
        at_fit = drawn.at_fit if drawn.at_fit is not None else np.zeros(len(drawn_models), dtype=bool)
        per_draw = []
        for d, drawn_model in enumerate(drawn_models):
            rate = float(drawn_rates[d]) / (365.25 / 12.0) if drawn_rates is not None else point.rate_per_day
            moved = caseload.under_draw(*now.under(drawn_model, bool(at_fit[d])))
            per_draw.append(_evaluate(moved, _parameters(drawn_model, caseload.rows, rate), days))
            if callback:
                callback(0.1 + 0.8 * (d + 1) / len(drawn_models))
        stacked = CountMoments(*(np.stack([getattr(m[0], f) for m in per_draw]) for f in ("mean", "variance", "third")))
        cells = {key: (stacked, [(d, m[2][key]) for d, m in enumerate(per_draw) if key in m[2]])
                 for key in np.ndindex(*n_cells)}
    else:
        single = CountMoments(moments.mean[None], moments.variance[None], moments.third[None])
        cells = {key: (single, [(0, exact_cells[key])] if key in exact_cells else []) for key in np.ndindex(*n_cells)}
    lower, upper = np.empty(n_cells), np.empty(n_cells)
    for key, (stack, exact) in cells.items():
        t, c = key
        cell = CountDistributions(CountMoments(stack.mean[:, t, c], stack.variance[:, t, c], stack.third[:, t, c]),
                                  dict(exact))
        lower[key], upper[key] = mixture_quantiles(cell)
    if callback:
        callback(1.0)
    names = tuple(model.stages) + (FOLLOW_UP_ROW,)
    return Outlook(as_of, tuple(ends), names, moments.mean, lower, upper, entries, open_cases, referrals,
                   "parameters" if drawn_models else "none", len(drawn_models or ()), seed, coordinator,
                   scores.model_version, tuple(drawn.kept_fixed) if drawn is not None else (),
                   now_rescored=int(now.sample.size) if drawn_models else 0)
