"""Log-likelihood of a whole caseload and its analytic gradient (batched forward-backward).

For one case with contacts ``0..n-1``, step matrices ``M_j`` (``P = expm(Q(x_{j-1}) dt_j)``, or
``P Q`` for a step into an exact-entry stage) and contact likelihoods ``e_j``:
``L = initial' diag(e_0) M_1 diag(e_1) ... M_{n-1} diag(e_{n-1}) 1``. With scaled forward
``a_j`` (sums to 1), scale factors ``c_j`` and scaled backward ``b_j``:

* ``d log L / d M_j[i, l] = a_{j-1}[i] e_j[l] b_j[l] / c_j``, summed over all steps that share a
  distinct (generator, gap, exact-entry) pair; then through ``P = expm(Q t)`` with
  :func:`hmm.fitting.expm_derivative.adjoint_derivative` (and the product rule for ``P Q``);
  then ``Q[r, s] = rate_rs exp(beta_rs . x)`` by the chain rule (the diagonal is minus the row sum);
* observation and initial probabilities from the smoothed probabilities ``a_j * b_j``
  (expected category counts), through the softmax parametrisation;
* with unscheduled contact rates ``lambda`` (the model's ``unscheduled_contacts`` block):
  ``P = expm((Q - Lambda) t)`` and ``M = P Lambda`` for a step into an unscheduled contact, so
  ``lambda`` gets the adjoint's diagonal (minus sign) plus the direct term of the column factor
  (see :mod:`hmm.inference` for the model).

The only Python loop is over contact position; each step is one numpy operation over all cases.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..exact_entry import effective_allowed_stages
from ..model import StageModel
from ..timelines import Timelines
from .expm_derivative import adjoint_derivative, decompose, transition_matrices
from .parameters import ParameterSpec, parameter_spec

__all__ = ["LikelihoodPlan", "prepare", "log_likelihood_and_gradient", "Evaluation"]


@dataclass
class LikelihoodPlan:
    """Parameter-free bookkeeping for one (model structure, timelines); build with :func:`prepare`.

    Contacts are stored *position-major*: block ``k`` holds the ``k``-th contact of every case
    that has one, cases in decreasing-length order, so block ``k`` continues the first
    ``block_sizes[k]`` rows of block ``k - 1``. ``order`` maps this layout to timeline rows.
    """

    spec: ParameterSpec
    timelines: Timelines
    n_stages: int
    order: np.ndarray               # (n_contacts,) timeline row of each position-major row
    block_starts: np.ndarray        # (K + 1,)
    block_sizes: np.ndarray         # (K,)
    case_of_row: np.ndarray         # (n_contacts,) case index of each position-major row
    step_pair: np.ndarray           # (n_contacts,) pair of the step into each row (-1 in block 0)
    pair_generator: np.ndarray      # (m,)
    pair_gap: np.ndarray            # (m,)
    pair_exact: np.ndarray          # (m,) bool: step into an exact-entry stage (matrix P Q)
    pair_unscheduled: np.ndarray    # (m,) bool: step into an unscheduled contact (matrix P Lambda)
    generator_covariates: np.ndarray  # (G, K) distinct covariate rows starting a step
    steps_by_pair: np.ndarray       # (n_steps,) position-major rows of steps, sorted by pair
    previous_by_pair: np.ndarray    # (n_steps,) the row before each of those
    pair_starts: np.ndarray         # (m + 1,) slices of steps_by_pair per pair
    large_pairs: np.ndarray         # pairs with many steps (one matrix product each)
    small_steps: np.ndarray         # indices into steps_by_pair of the other pairs' steps
    small_starts: np.ndarray        # reduceat starts within small_steps
    small_pairs: np.ndarray         # pair of each small_starts segment
    one_hot: list                   # per channel: (n_contacts, C) float, 0 rows when missing
    codes: list                     # per channel: (n_contacts,) int codes (-1 missing)
    allowed: np.ndarray             # (n_contacts, S) float


_LARGE_PAIR = 48


def prepare(model: StageModel, timelines: Timelines, spec: ParameterSpec | None = None) -> LikelihoodPlan:
    """Precompute everything that does not depend on parameter values."""
    spec = parameter_spec(model) if spec is None else spec
    s = model.n_stages
    if timelines.observations.shape[1] != len(model.channels):
        raise ValueError(f"timelines have {timelines.observations.shape[1]} channels, model has {len(model.channels)}")
    if timelines.covariates.shape[1] != model.n_covariates:
        raise ValueError(f"timelines have {timelines.covariates.shape[1]} covariates, model has {model.n_covariates}")
    counts = timelines.n_contacts_per_case
    case_order = np.argsort(-counts, kind="stable")
    starts = timelines.offsets[:-1][case_order]
    n_max = int(counts.max()) if counts.size else 0
    block_sizes = np.array([np.count_nonzero(counts > k) for k in range(n_max)], dtype=np.int64)
    block_starts = np.concatenate([[0], np.cumsum(block_sizes)]).astype(np.int64)
    order = np.concatenate([starts[:size] + k for k, size in enumerate(block_sizes)]) if n_max else \
        np.zeros(0, dtype=np.int64)
    case_of_row = np.concatenate([case_order[:size] for size in block_sizes]) if n_max else order.copy()
    n = timelines.n_contacts
    step_rows = np.arange(block_sizes[0] if n_max else 0, n)               # position-major
    previous = np.concatenate([block_starts[k - 1] + np.arange(size) for k, size in enumerate(block_sizes)
                               if k > 0]) if n_max > 1 else np.zeros(0, dtype=np.int64)
    from_rows = order[previous]
    gaps = timelines.times[order[step_rows]] - timelines.times[from_rows]
    if model.n_covariates and from_rows.size:
        generator_covariates, generator_index = np.unique(timelines.covariates[from_rows], axis=0,
                                                          return_inverse=True)
        generator_index = generator_index.reshape(-1)
    else:
        generator_covariates = np.zeros((1, model.n_covariates))
        generator_index = np.zeros(from_rows.size, dtype=np.int64)
    exact_mask = np.zeros(s, dtype=bool)
    for name in model.exact_entry_stages:
        exact_mask[model.stage_index(name)] = True
    allowed_rows = timelines.allowed_stages[order]
    single = allowed_rows.sum(axis=1) == 1
    # the exact-entry convention has one home (hmm.exact_entry.effective_allowed_stages)
    allowed_rows = effective_allowed_stages(model, allowed_rows)
    allowed_steps = allowed_rows[step_rows]
    # an entry is a single-stage record of an exact-entry stage not already known at the contact before
    exact = single[step_rows] & (allowed_steps & exact_mask).any(axis=1) & \
        ~(single[previous] & (allowed_rows[previous] == allowed_steps).all(axis=1))
    columns = [generator_index.astype(float), gaps, exact.astype(float)]
    if model.unscheduled_contacts is not None:
        # a step into an unscheduled contact (not a record of exact entry) has the matrix P Lambda
        columns.append((timelines.unscheduled_mask[order[step_rows]] & ~exact).astype(float))
    keys = np.stack(columns, axis=1)
    pairs, pair_index = np.unique(keys, axis=0, return_inverse=True)
    pair_index = pair_index.reshape(-1)
    step_pair = np.full(n, -1, dtype=np.int64)
    step_pair[step_rows] = pair_index
    sort = np.argsort(pair_index, kind="stable")
    pair_starts = np.searchsorted(pair_index[sort], np.arange(pairs.shape[0] + 1))
    sizes = np.diff(pair_starts)
    large = np.flatnonzero(sizes >= _LARGE_PAIR)
    small = np.flatnonzero(sizes < _LARGE_PAIR)
    small_steps = np.concatenate([np.arange(pair_starts[p], pair_starts[p + 1]) for p in small]) if small.size \
        else np.zeros(0, dtype=np.int64)
    small_starts = np.concatenate([[0], np.cumsum(sizes[small])[:-1]]).astype(np.int64) if small.size \
        else np.zeros(0, dtype=np.int64)
    one_hot, codes = [], []
    for c, channel in enumerate(model.channels):
        code = timelines.observations[order, c].astype(np.int64)
        if code.size and code.max() >= channel.n_categories:
            raise ValueError(f"channel {channel.name!r}: category code {code.max()} out of range")
        hot = np.zeros((n, channel.n_categories))
        seen = code >= 0
        hot[np.flatnonzero(seen), code[seen]] = 1.0
        one_hot.append(hot)
        codes.append(code)
    return LikelihoodPlan(
        spec=spec, timelines=timelines, n_stages=s, order=order, block_starts=block_starts,
        block_sizes=block_sizes, case_of_row=case_of_row, step_pair=step_pair,
        pair_generator=pairs[:, 0].astype(np.int64), pair_gap=pairs[:, 1], pair_exact=pairs[:, 2] > 0.5,
        pair_unscheduled=pairs[:, 3] > 0.5 if pairs.shape[1] > 3 else np.zeros(pairs.shape[0], dtype=bool),
        generator_covariates=generator_covariates, steps_by_pair=step_rows[sort], previous_by_pair=previous[sort],
        pair_starts=pair_starts, large_pairs=large, small_steps=small_steps, small_starts=small_starts,
        small_pairs=small, one_hot=one_hot, codes=codes,
        allowed=allowed_rows.astype(float))


@dataclass
class Evaluation:
    """Result of one likelihood evaluation.

    Attributes
    ----------
    log_likelihood : float
    gradient : ndarray, shape (n_free,) or None
    case_log_likelihood : ndarray, shape (n_cases,)
    smoothed : ndarray, shape (n_contacts, S) or None
    """

    log_likelihood: float
    gradient: np.ndarray | None
    case_log_likelihood: np.ndarray
    smoothed: np.ndarray | None = None


def _generators(plan: LikelihoodPlan, rates, effects) -> np.ndarray:
    m = plan.spec.template
    x = plan.generator_covariates
    src = np.array([t.source for t in m.transitions], dtype=np.int64)
    dst = np.array([t.target for t in m.transitions], dtype=np.int64)
    q_off = rates[None, :] * np.exp(x @ effects.T)            # (G, n_transitions)
    q = np.zeros((x.shape[0], plan.n_stages, plan.n_stages))
    q[:, src, dst] = q_off
    idx = np.arange(plan.n_stages)
    q[:, idx, idx] = -q.sum(axis=2)
    return q, q_off, src, dst


def _contact_rates(plan: LikelihoodPlan, arrays) -> np.ndarray | None:
    """Unscheduled contact rates per day for each generator's covariate row, shape (G, S), or None."""
    if arrays.unscheduled_rates is None:
        return None
    return arrays.unscheduled_rates[None, :] * np.exp(plan.generator_covariates @ arrays.unscheduled_effects)[:, None]


def evaluate(plan: LikelihoodPlan, theta: np.ndarray, gradient: bool = True, method: str = "auto") -> Evaluation:
    """Log-likelihood (and gradient with respect to ``theta``) over the caseload of ``plan``."""
    spec = plan.spec
    arrays = spec.arrays(np.asarray(theta, dtype=float))
    q, q_off, src, dst = _generators(plan, arrays.rates, arrays.effects)
    contact_rates = _contact_rates(plan, arrays)
    if contact_rates is None:
        cache = decompose(q, method)
    else:  # the interval matrices come from the sub-generator Q - Lambda
        quiet = q.copy()
        quiet[:, np.arange(plan.n_stages), np.arange(plan.n_stages)] -= contact_rates
        cache = decompose(quiet, method)
    p_matrices = transition_matrices(cache, plan.pair_generator, plan.pair_gap)
    steps = p_matrices.copy()
    if plan.pair_exact.any():
        ex = np.flatnonzero(plan.pair_exact)
        steps[ex] = p_matrices[ex] @ q[plan.pair_generator[ex]]
    if plan.pair_unscheduled.any():
        un = np.flatnonzero(plan.pair_unscheduled)
        steps[un] = p_matrices[un] * contact_rates[plan.pair_generator[un]][:, None, :]
    e = plan.allowed.copy()
    for c, table in enumerate(arrays.emissions):
        with_missing = np.hstack([table, np.ones((plan.n_stages, 1))]).T
        e *= with_missing[plan.codes[c]]
    n, s = e.shape
    bs, sizes = plan.block_starts, plan.block_sizes
    alpha = np.empty((n, s))
    scale = np.ones(n)
    if n:
        first = slice(0, sizes[0])
        a0 = arrays.initial[None, :] * e[first]
        c0 = a0.sum(axis=1)
        alpha[first] = a0 / np.where(c0 > 0, c0, 1.0)[:, None]
        scale[first] = c0
    for k in range(1, sizes.size):
        cur, prev = slice(bs[k], bs[k] + sizes[k]), slice(bs[k - 1], bs[k - 1] + sizes[k])
        a = np.einsum("ni,nij->nj", alpha[prev], steps[plan.step_pair[cur]]) * e[cur]
        c = a.sum(axis=1)
        alpha[cur] = a / np.where(c > 0, c, 1.0)[:, None]
        scale[cur] = c
    with np.errstate(divide="ignore", invalid="ignore"):
        log_scale = np.log(np.where(scale > 0, scale, 0.0))
    case_ll = np.bincount(plan.case_of_row, weights=log_scale, minlength=plan.timelines.n_cases)
    total = float(log_scale.sum())
    if not gradient or not np.isfinite(total):
        return Evaluation(total, None if not gradient else np.full(spec.n_free, np.nan), case_ll)

    # backward pass; b_store[j] = e_j * beta_j / c_j for every row after a case's first
    beta = np.ones((n, s))
    b_store = np.zeros((n, s))
    for k in range(sizes.size - 1, 0, -1):
        cur, prev = slice(bs[k], bs[k] + sizes[k]), slice(bs[k - 1], bs[k - 1] + sizes[k])
        b = e[cur] * beta[cur] / scale[cur][:, None]
        b_store[cur] = b
        beta[prev] = np.einsum("nij,nj->ni", steps[plan.step_pair[cur]], b)
    smoothed = alpha * beta
    grad = np.zeros(spec.n_free)

    # --- transitions: dl/dM aggregated per distinct pair
    if plan.steps_by_pair.size:
        weights = np.zeros((plan.pair_gap.size, s, s))
        a_sorted = alpha[plan.previous_by_pair]
        b_sorted = b_store[plan.steps_by_pair]
        for p in plan.large_pairs:
            part = slice(plan.pair_starts[p], plan.pair_starts[p + 1])
            weights[p] = a_sorted[part].T @ b_sorted[part]
        if plan.small_pairs.size:
            outer = (a_sorted[plan.small_steps][:, :, None] * b_sorted[plan.small_steps][:, None, :]).reshape(-1, s * s)
            weights[plan.small_pairs] = np.add.reduceat(outer, plan.small_starts, axis=0).reshape(-1, s, s)
        _transition_gradient(plan, spec, cache, p_matrices, q, q_off, src, dst, weights, grad, arrays,
                             contact_rates)

    # --- observation probabilities: expected counts N[s, k]
    for c, rows_spec in enumerate(spec.emission_rows):
        if all(r is None for r in rows_spec):
            continue
        counts = smoothed.T @ plan.one_hot[c]                   # (S, C)
        for r, row in enumerate(rows_spec):
            if row is not None:
                grad[row.slots] += counts[r, row.free] - arrays.emissions[c][r, row.free] * counts[r, row.support].sum()
    if spec.initial_row is not None:
        row = spec.initial_row
        first = smoothed[:plan.block_sizes[0]].sum(axis=0)
        grad[row.slots] += first[row.free] - arrays.initial[row.free] * first[row.support].sum()
    smoothed_rows = np.empty_like(smoothed)
    smoothed_rows[plan.order] = smoothed
    return Evaluation(total, grad, case_ll, smoothed_rows)


def _transition_gradient(plan, spec, cache, p, q, q_off, src, dst, weights, grad, arrays=None,
                         contact_rates=None) -> None:
    """Add d l / d(log rate, effect) to ``grad`` given ``weights`` = d l / d(step matrix) per pair.

    With unscheduled contact rates ``lambda`` (shape (G, S)) the interval matrices are
    ``P = expm((Q - Lambda) t)`` and the adjoint is with respect to ``Q - Lambda``; ``lambda_s``
    enters its diagonal with a minus sign and, for steps into an unscheduled contact, directly as
    the column factor of ``P Lambda``.
    """
    grad_q_direct = np.zeros_like(weights)
    grad_rates_direct = None
    if plan.pair_exact.any():
        ex = np.flatnonzero(plan.pair_exact)
        w_ex = weights[ex]
        grad_q_direct[ex] = np.swapaxes(p[ex], 1, 2) @ w_ex                 # d<W, P Q>/dQ = P^T W
        weights[ex] = w_ex @ np.swapaxes(q[plan.pair_generator[ex]], 1, 2)  # d<W, P Q>/dP = W Q^T
    if plan.pair_unscheduled.any():
        un = np.flatnonzero(plan.pair_unscheduled)
        lam = contact_rates[plan.pair_generator[un]][:, None, :]
        grad_rates_direct = np.zeros_like(contact_rates)
        np.add.at(grad_rates_direct, plan.pair_generator[un], (weights[un] * p[un]).sum(axis=1))  # d<W, P L>/dL
        weights[un] = weights[un] * lam                                                         # d<W, P L>/dP
    grad_sub_pairs = adjoint_derivative(cache, plan.pair_generator, plan.pair_gap, weights)
    grad_q = np.zeros_like(q)
    np.add.at(grad_q, plan.pair_generator, grad_sub_pairs + grad_q_direct)
    if contact_rates is not None:
        grad_sub = np.zeros_like(q)
        np.add.at(grad_sub, plan.pair_generator, grad_sub_pairs)
        _contact_rate_gradient(plan, spec, grad_sub, grad_rates_direct, contact_rates, grad)
    # q_rs enters Q[r, s] and (with minus sign) Q[r, r]
    d_qoff = grad_q[:, src, dst] - grad_q[:, src, src]     # (G, n_transitions)
    weighted = d_qoff * q_off                                # d l / d log q_rs(x_g)
    free = np.flatnonzero(spec.rate_slots >= 0)
    grad[spec.rate_slots[free]] += weighted[:, free].sum(axis=0)
    eff = np.argwhere(spec.effect_slots >= 0)
    if eff.size:
        x = plan.generator_covariates
        grad[spec.effect_slots[eff[:, 0], eff[:, 1]]] += (weighted[:, eff[:, 0]] * x[:, eff[:, 1]]).sum(axis=0)


def _contact_rate_gradient(plan, spec, grad_sub, grad_rates_direct, contact_rates, grad) -> None:
    """Add d l / d(log unscheduled contact rate, log rate ratio) to ``grad``.

    ``lambda_gs = rate_s exp(gamma . x_g)`` sits on the diagonal of ``Q - Lambda`` (minus sign) and
    in the column factor of steps into unscheduled contacts (``grad_rates_direct``).
    """
    idx = np.arange(plan.n_stages)
    d_lambda = -grad_sub[:, idx, idx]                                  # (G, S)
    if grad_rates_direct is not None:
        d_lambda = d_lambda + grad_rates_direct
    weighted = d_lambda * contact_rates                                # d l / d log lambda_gs
    slots = spec.unscheduled_rate_slots
    free = np.flatnonzero(slots >= 0)
    np.add.at(grad, slots[free], weighted[:, free].sum(axis=0))
    effect_slots = spec.unscheduled_effect_slots
    for k in np.flatnonzero(effect_slots >= 0):
        grad[effect_slots[k]] += float((weighted.sum(axis=1) * plan.generator_covariates[:, k]).sum())


def log_likelihood_and_gradient(model: StageModel, timelines: Timelines, free_vector=None,
                                spec: ParameterSpec | None = None, method: str = "auto") -> tuple:
    """Log-likelihood of ``timelines`` and its gradient with respect to the free parameters.

    Parameters
    ----------
    model : StageModel
        Structure and fixed values (and the values used when ``free_vector`` is None).
    timelines : Timelines
    free_vector : ndarray, shape (n_free,), optional
        Unconstrained free parameters (see :mod:`hmm.fitting.parameters`).
    spec : ParameterSpec, optional
        Defaults to ``parameter_spec(model)``.
    method : {"auto", "eigen", "expm"}
        Matrix-exponential path (``"expm"`` forces the scipy/Van Loan fallback).

    Returns
    -------
    log_likelihood : float
    gradient : ndarray, shape (n_free,)
    """
    spec = parameter_spec(model) if spec is None else spec
    theta = spec.to_vector(model) if free_vector is None else np.asarray(free_vector, dtype=float)
    result = evaluate(prepare(model, timelines, spec), theta, gradient=True, method=method)
    return result.log_likelihood, result.gradient
