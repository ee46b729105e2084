"""Forward-backward, smoothing and Viterbi for a whole caseload at once.

Every function works on all cases together. Cases are put in order of decreasing number of
contacts, so the cases that have a ``k``-th contact form a prefix of that order; the only Python
loop is over the contact position ``k``, each step being one numpy operation over all those cases.
Transition matrices are computed once per distinct (covariate row, gap) pair
(:func:`hmm.transition.distinct_transition_matrices`). Stage probabilities on a given day and
forecasts from them are in :mod:`hmm.forecasting`.

Model conventions
-----------------
* ``model.initial`` applies at each case's first contact: ``alpha_0 = initial * likelihood_0``.
* The move from contact ``j`` to ``j + 1`` uses the generator built from the covariates
  recorded at contact ``j`` (covariates are piecewise constant).
* The observation model enters only through :func:`contact_likelihoods`.
* Exact entry into an absorbing stage: when a contact allows exactly one stage ``s`` and ``s`` is
  in ``model.exact_entry_stages``, the contact records the date the case *entered* ``s``. The
  step into it is then "in some transient stage ``r`` just before, and moved to ``s`` at that
  date": column ``s`` of the step matrix is the density
  ``sum_{r != s} P(prev -> r, dt) * Q[r, s]`` (per day) instead of ``P(prev -> s, dt)``.
  The log-likelihood then includes ``log(rate)`` terms, as usual for exactly observed
  transition times (Jackson 2011, msm, "exact death times").
* Timing of unscheduled contacts (only with ``model.unscheduled_contacts``): between two contacts
  the stage evolves under Q while unscheduled contacts arrive at rate ``lambda_s`` of the current
  stage, so the step matrix is ``expm((Q - Lambda) gap)`` (no unscheduled contact in between),
  times ``Lambda = diag(lambda)`` when the later contact is unscheduled: a Markov-modulated Poisson
  process joined to the stage process (Fischer & Meier-Hellstern 1993; for observation times driven
  by a hidden stage, Luo & Sherlock 2025). Scheduled contacts carry no timing information; the first
  contact of each case is conditioned on. A step into an exact-entry record is
  ``expm((Q - Lambda) gap) Q`` in the entered stage's column (a record of entry is not an
  unscheduled contact). Without the block every step is ``expm(Q gap)`` exactly as before.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .exact_entry import contacts_after_absorbing_entry, effective_allowed_stages, entry_steps
from .forward_backward import CaseLayout, case_layout, scaled_backward, scaled_forward
from .model import StageModel
from .timelines import Timelines
from .contact_timing import unscheduled_steps
from .transition import covariate_groups, distinct_transition_matrices

__all__ = [
    "ForwardResult", "contact_likelihoods", "forward", "backward",
    "smoothed_probabilities", "most_likely_path", "effective_allowed_stages", "contacts_after_absorbing_entry",
]


# --------------------------------------------------------------------------- observation hook
def contact_likelihoods(model: StageModel, timelines: Timelines, rows: np.ndarray | None = None) -> np.ndarray:
    """Probability of each contact's recorded evidence given each stage.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    rows : ndarray of int, shape (m,), optional
        Return the contacts in this order (``result[i]`` is contact ``rows[i]``); all contacts
        in their own order when None.

    Returns
    -------
    ndarray, shape (n_contacts, n_stages) or (m, n_stages)
        Product over channels of the emission probability of the recorded category (a missing
        value contributes 1), times 0/1 for the contact's ``allowed_stages``.
    """
    observations = timelines.observations
    if observations.shape[1] != len(model.channels):
        raise ValueError(f"timelines have {observations.shape[1]} observation channels, "
                         f"the model has {len(model.channels)}")
    tables = model.emission_matrices()
    for c, table in enumerate(tables):
        codes = observations[:, c]
        if codes.size and (codes.max() >= table.shape[1] or codes.min() < -1):
            raise ValueError(f"channel {model.channels[c].name!r}: category code out of range "
                             f"-1..{table.shape[1] - 1}")
    # One table over joint codes of all channels (a missing value is its own code, probability 1),
    # so each contact needs a single lookup; per-channel lookups if that table would be large.
    sizes = [t.shape[1] + 1 for t in tables]
    allowed = effective_allowed_stages(model, timelines.allowed_stages)
    if rows is not None:
        rows = np.asarray(rows, dtype=np.int64)
        observations, allowed = np.take(observations, rows, axis=0), np.take(allowed, rows, axis=0)
    if tables and np.prod(sizes, dtype=float) <= 4096:
        joint = np.ones((1, model.n_stages))
        code = np.zeros(observations.shape[0], dtype=np.int64)
        for table, size, c in zip(tables, sizes, range(len(tables))):
            with_missing = np.vstack([table.T, np.ones((1, model.n_stages))])     # (C + 1, S), row C = missing
            joint = (joint[:, None, :] * with_missing[None, :, :]).reshape(-1, model.n_stages)
            code = code * size + np.where(observations[:, c] < 0, size - 1, observations[:, c])
        likelihood = np.take(joint, code, axis=0)
        likelihood *= allowed  # times 0/1: the same numbers as 0/1 times the lookup
    else:
        likelihood = allowed.astype(float)
        for c, table in enumerate(tables):
            # Row -1 (the appended ones) is what a MISSING (-1) code picks.
            likelihood *= np.vstack([table.T, np.ones((1, model.n_stages))])[observations[:, c]]
    return likelihood


# --------------------------------------------------------------------------- shared plan
@dataclass
class _Plan:
    """Everything forward, backward and Viterbi share for one (model, timelines).

    Contacts are laid out *position-major* (:class:`hmm.forward_backward.CaseLayout`, the layout the
    fitting likelihood walks too): all first contacts (cases in decreasing-length order), then all
    second contacts, and so on. ``layout[i]`` is the original row of position-major row ``i``.
    """

    case_layout: CaseLayout
    likelihood: np.ndarray        # (n_contacts, S), position-major
    step_matrices: np.ndarray     # (m, S, S)
    step_index: np.ndarray        # (n_contacts,) position-major; matrix for the step INTO each contact
    unusable_cases: np.ndarray | None = None  # (n_cases,) bool: a step's generator overflowed; None if none

    @property
    def layout(self) -> np.ndarray:
        return self.case_layout.order

    @property
    def active_counts(self) -> np.ndarray:
        return self.case_layout.block_sizes

    @property
    def base(self) -> np.ndarray:
        return self.case_layout.block_starts[:-1]

    def current(self, k: int) -> slice:
        return self.case_layout.current(k)

    def previous(self, k: int) -> slice:
        return self.case_layout.previous(k)

    def steps(self, k: int) -> np.ndarray:
        return np.take(self.step_matrices, self.step_index[self.current(k)], axis=0)

    def to_rows(self, values: np.ndarray) -> np.ndarray:
        """Position-major array back to the timelines' row order."""
        return self.case_layout.to_rows(values)


def _prepare(model: StageModel, timelines: Timelines, method: str = "auto") -> _Plan:
    n_stages = model.n_stages
    if timelines.allowed_stages.shape[1] != n_stages:
        raise ValueError(f"timelines allow {timelines.allowed_stages.shape[1]} stages, model has {n_stages}")
    n = timelines.n_contacts
    unusable = None
    step_index = np.full(n, -1, dtype=np.int64)
    into = np.ones(n, dtype=bool)
    into[timelines.first_index] = False
    into_rows = np.flatnonzero(into)
    if into_rows.size:
        distinct, group = covariate_groups(timelines.covariates[into_rows - 1])
        gaps = timelines.times[into_rows] - timelines.times[into_rows - 1]
        timing = model.unscheduled_contacts is not None
        generators, quiet, unusable = _step_generators(model, distinct, group, into_rows, timelines)
        matrices, index = distinct_transition_matrices(quiet if timing else generators, gaps, group, method,
                                                       sub_generators=timing)
        # the rule for which steps record an entry has one home (hmm.exact_entry.entry_steps)
        exact_rows = entry_steps(model, timelines.allowed_stages, into_rows, into_rows - 1)
        if exact_rows.any():
            matrices, index = _with_entry_densities(model, matrices, index, group, generators, exact_rows)
        if timing:
            matrices, index = unscheduled_steps(model, distinct, group, matrices, index,
                                                 timelines.unscheduled_mask[into_rows] & ~exact_rows)
        step_index[into_rows] = index
    else:
        matrices = np.zeros((0, n_stages, n_stages))
    layout = case_layout(timelines.offsets)
    # the likelihoods are computed straight in position-major order (no second copy to reorder)
    return _Plan(layout, contact_likelihoods(model, timelines, layout.order), matrices,
                 np.take(step_index, layout.order), unusable_cases=unusable)


def _step_generators(model: StageModel, distinct: np.ndarray, group: np.ndarray, into_rows: np.ndarray,
                     timelines: Timelines) -> tuple:
    """Generators (and ``Q - Lambda`` with unscheduled contacts) per distinct covariate row; cases they fail.

    A rate that overflows (or passes MAX_RATE_PER_DAY) fails only the cases that use it: their
    steps become placeholders (identity) and forward marks them not finite.

    Returns
    -------
    generators : ndarray, shape (G, S, S)
    quiet : ndarray, shape (G, S, S) or None
    unusable : ndarray of bool, shape (n_cases,), or None when every row is usable
    """
    with np.errstate(over="ignore", invalid="ignore"):
        generators = model.generators(distinct)
        quiet = model.quiet_generators(distinct) if model.unscheduled_contacts is not None else None
    usable = model.usable_covariate_rows(distinct)
    if usable.all():
        return generators, quiet, None
    generators[~usable] = 0.0
    if quiet is not None:
        quiet[~usable] = 0.0
    failed_contacts = np.zeros(timelines.n_contacts, dtype=bool)
    failed_contacts[into_rows[~usable[group]]] = True
    return generators, quiet, np.add.reduceat(failed_contacts.astype(np.int64), timelines.offsets[:-1]) > 0


def _with_entry_densities(model: StageModel, matrices: np.ndarray, index: np.ndarray, group: np.ndarray,
                          generators: np.ndarray, exact_rows: np.ndarray) -> tuple:
    """Step matrices with a second copy of every pair a recorded entry uses, its entry columns the density.

    The density is ``sum_{r != s} P(prev -> r) Q[r, s]``; ``Q[s, s] = 0`` for an absorbing ``s``, so it
    is ``(P Q)[:, s]``. Returns the extended matrices and the index with entry steps pointing at the copies.
    """
    needed = np.unique(index[exact_rows])
    pair_generator = np.zeros(matrices.shape[0], dtype=np.int64)
    pair_generator[index] = group
    density = matrices[needed] @ generators[pair_generator[needed]]
    exact_stages = [model.stage_index(s) for s in model.exact_entry_stages]
    entered = matrices[needed].copy()
    entered[:, :, exact_stages] = density[:, :, exact_stages]
    position = np.full(matrices.shape[0], -1)
    position[needed] = matrices.shape[0] + np.arange(needed.size)
    return np.concatenate([matrices, entered]), np.where(exact_rows, position[index], index)


# --------------------------------------------------------------------------- forward-backward
@dataclass
class ForwardResult:
    """Scaled forward pass.

    Attributes
    ----------
    log_likelihood : ndarray, shape (n_cases,)
        Log-likelihood of each case's timeline (``-inf`` if impossible under the model, ``nan``
        if the case's covariates make a transition rate overflow; see :attr:`finite`).
    filtered : ndarray, shape (n_contacts, n_stages)
        P(stage at contact j | that case's evidence up to and including contact j); a row of zeros
        after the evidence became impossible.
    log_scale : ndarray, shape (n_contacts,)
        Log of the per-contact scaling constant; summed over a case it gives ``log_likelihood``.
    """

    log_likelihood: np.ndarray
    filtered: np.ndarray
    log_scale: np.ndarray
    _plan: _Plan = field(default=None, repr=False)

    @property
    def finite(self) -> np.ndarray:
        """ndarray of bool, shape (n_cases,): the case's log-likelihood is a finite number.

        False for a case impossible under the model (``-inf``: for example a contact after a
        recorded entry into an absorbing stage, see :func:`contacts_after_absorbing_entry`) and
        for a case whose covariates make a rate overflow (``nan``; its ``filtered`` rows are nan).
        The other cases' numbers do not depend on these: a notebook can keep
        ``timelines.subset(result.finite)``.
        """
        return np.isfinite(self.log_likelihood)


def _forward(plan: _Plan, initial: np.ndarray, timelines: Timelines) -> ForwardResult:
    n = plan.likelihood.shape[0]
    filtered, scale = scaled_forward(plan.case_layout, initial, plan.likelihood, plan.step_matrices,
                                     plan.step_index)
    with np.errstate(divide="ignore"):
        log_scale = plan.to_rows(np.log(scale))
    filtered = plan.to_rows(filtered)
    log_likelihood = np.add.reduceat(log_scale, timelines.offsets[:-1]) if n else np.zeros(0)
    if plan.unusable_cases is not None:
        log_likelihood[plan.unusable_cases] = np.nan
        filtered[np.repeat(plan.unusable_cases, timelines.n_contacts_per_case)] = np.nan
    return ForwardResult(log_likelihood, filtered, log_scale, plan)


def forward(model: StageModel, timelines: Timelines, method: str = "auto") -> ForwardResult:
    """Scaled forward algorithm over every case.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    method : {"auto", "eigen", "expm"}
        How transition matrices are computed (:func:`hmm.transition.distinct_transition_matrices`).

    Returns
    -------
    ForwardResult
        ``log_likelihood`` (n_cases,), ``filtered`` (n_contacts, n_stages), ``log_scale`` (n_contacts,).
    """
    plan = _prepare(model, timelines, method)
    return _forward(plan, np.asarray(model.initial, dtype=float), timelines)


def backward(model: StageModel, timelines: Timelines, forward_result: ForwardResult | None = None) -> np.ndarray:
    """Scaled backward variables.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    forward_result : ForwardResult, optional
        From :func:`forward` on the same inputs (computed if not given; its scaling is used).

    Returns
    -------
    ndarray, shape (n_contacts, n_stages)
        ``beta_j[r] = P(evidence after contact j | stage r at j) / prod of later scale constants``,
        so ``filtered * beta`` is the smoothed distribution. 1 at each case's last contact.
    """
    if forward_result is None or forward_result._plan is None:
        forward_result = forward(model, timelines)
    plan = forward_result._plan
    scale = np.exp(forward_result.log_scale[plan.layout])
    scale = np.where(scale > 0, scale, 1.0)
    beta = scaled_backward(plan.case_layout, plan.likelihood, scale, plan.step_matrices, plan.step_index)
    return plan.to_rows(beta)


def smoothed_probabilities(model: StageModel, timelines: Timelines, method: str = "auto",
                           forward_result: ForwardResult | None = None) -> np.ndarray:
    """P(stage at each contact | all of that case's evidence), by scaled forward-backward.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    method : {"auto", "eigen", "expm"}
    forward_result : ForwardResult, optional
        Reuse an earlier :func:`forward` on the same inputs.

    Returns
    -------
    ndarray, shape (n_contacts, n_stages)
        Rows sum to 1 (rows of zeros for cases whose evidence is impossible under the model).
    """
    if forward_result is None or forward_result._plan is None:
        forward_result = forward(model, timelines, method)
    smoothed = forward_result.filtered * backward(model, timelines, forward_result)
    total = smoothed.sum(axis=1, keepdims=True)
    return smoothed / np.where(total > 0, total, 1.0)


def most_likely_path(model: StageModel, timelines: Timelines, method: str = "auto",
                     forward_result: ForwardResult | None = None) -> np.ndarray:
    """Most likely sequence of stages at the contacts of each case (Viterbi, in log space).

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    method : {"auto", "eigen", "expm"}
    forward_result : ForwardResult, optional
        From :func:`forward` on the same inputs; only its transition matrices are reused.

    Returns
    -------
    ndarray of int64, shape (n_contacts,)
        Stage index at every contact; ties go to the lower stage index.
    """
    plan = forward_result._plan if forward_result is not None and forward_result._plan is not None \
        else _prepare(model, timelines, method)
    n, n_stages = plan.likelihood.shape
    with np.errstate(divide="ignore"):
        log_likelihood = np.log(plan.likelihood)
        log_steps = np.log(plan.step_matrices)
        log_initial = np.log(np.asarray(model.initial, dtype=float))
    score = np.empty((n, n_stages))
    pointer = np.zeros((n, n_stages), dtype=np.int16)
    counts = plan.active_counts
    for k in range(counts.size):
        rows = plan.current(k)
        if k == 0:
            score[rows] = log_initial[None, :] + log_likelihood[rows]
            continue
        candidates = score[plan.previous(k)][:, :, None] + np.take(log_steps, plan.step_index[rows], axis=0)
        best = candidates.argmax(axis=1)
        pointer[rows] = best
        score[rows] = np.take_along_axis(candidates, best[:, None, :], axis=1)[:, 0, :] + log_likelihood[rows]
    path = np.zeros(n, dtype=np.int64)
    for k in range(counts.size - 1, -1, -1):
        rows = plan.current(k)
        # Cases whose last contact is at position k (the tail of the active prefix) start the
        # trace-back from their best final score; the others follow the pointer from position k + 1.
        following = counts[k + 1] if k + 1 < counts.size else 0
        ending = slice(rows.start + following, rows.stop)
        path[ending] = score[ending].argmax(axis=1)
        if following:
            later = slice(plan.base[k + 1], plan.base[k + 1] + following)
            path[rows.start:rows.start + following] = pointer[later][np.arange(following), path[later]]
    return plan.to_rows(path)
