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

The recursions are the shared core (:mod:`hmm.forward_backward`): the only Python loops are over
contact position (and chunks of rows within it) and over distinct pairs. The cases are split into
blocks evaluated in parallel threads (:mod:`hmm.fitting.likelihood_plan`); only per-pair and
per-evidence-pattern sums leave a block.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from ..forward_backward import scaled_backward, scaled_forward
from ..model import StageModel
from ..timelines import Timelines
from .expm_derivative import adjoint_derivative, decompose, pair_transition_matrices
from .likelihood_plan import CaseBlock, LikelihoodPlan, prepare
from .parameters import ParameterSpec, parameter_spec

__all__ = ["LikelihoodPlan", "prepare", "evaluate", "log_likelihood_and_gradient", "Evaluation"]


@dataclass
class Evaluation:
    """Result of one likelihood evaluation.

    Attributes
    ----------
    log_likelihood : float
    gradient : ndarray, shape (n_free,) or None
    case_log_likelihood : ndarray, shape (n_cases,)
    smoothed : ndarray, shape (n_contacts, S) or None
        Smoothed stage probabilities in timelines row order (only when asked for).
    """

    log_likelihood: float
    gradient: np.ndarray | None
    case_log_likelihood: np.ndarray
    smoothed: np.ndarray | None = None


@dataclass
class _BlockSums:
    """What one case block contributes: log-likelihood and the sums the gradient needs."""

    log_likelihood: float
    case_log_likelihood: np.ndarray      # (n_cases,), zero outside the block
    step_weights: np.ndarray | None      # (m, S, S): d l / d (step matrix) summed per pair
    evidence_counts: np.ndarray | None   # (J, S): smoothed probabilities summed per evidence pattern
    initial_counts: np.ndarray | None    # (S,): smoothed probabilities at first contacts
    smoothed: np.ndarray | None = None   # (n_rows, S) position-major, when asked for


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


def _step_matrices(plan: LikelihoodPlan, arrays, method: str) -> tuple:
    """Generators, their eigen cache, ``P = expm(Q t)`` per pair and the step matrices (``P Q``, ``P Lambda``)."""
    q, q_off, src, dst = _generators(plan, arrays.rates, arrays.effects)
    contact_rates = _contact_rates(plan, arrays)
    if contact_rates is None:
        cache = decompose(q, method)
    else:  # the interval matrices come from the sub-generator Q - Lambda
        quiet = q.copy()
        quiet[:, np.arange(plan.n_stages), np.arange(plan.n_stages)] -= contact_rates
        cache = decompose(quiet, method)
    p_matrices = pair_transition_matrices(cache, plan.pair_generator, plan.pair_gap)
    steps = p_matrices.copy()
    if plan.pair_exact.any():
        ex = np.flatnonzero(plan.pair_exact)
        steps[ex] = p_matrices[ex] @ q[plan.pair_generator[ex]]
    if plan.pair_unscheduled.any():
        un = np.flatnonzero(plan.pair_unscheduled)
        steps[un] = p_matrices[un] * contact_rates[plan.pair_generator[un]][:, None, :]
    return (q, q_off, src, dst), contact_rates, cache, p_matrices, steps


def _evidence_table(plan: LikelihoodPlan, arrays) -> np.ndarray:
    """Likelihood of each evidence pattern given each stage, shape (J, S) (a missing value contributes 1)."""
    table = plan.evidence_allowed.copy()
    for c, emission in enumerate(arrays.emissions):
        with_missing = np.vstack([emission.T, np.ones((1, plan.n_stages))])   # row -1 = not observed
        table *= with_missing[plan.evidence_codes[:, c]]
    return table


def _block_pass(plan: LikelihoodPlan, block: CaseBlock, initial: np.ndarray, evidence_table: np.ndarray,
                steps: np.ndarray, gradient: bool, want_smoothed: bool) -> _BlockSums:
    """Forward (and for the gradient backward) over one case block; per-pair and per-pattern sums."""
    n, s = block.n_rows, plan.n_stages
    likelihood = np.take(evidence_table, block.evidence, axis=0, out=block.buffer("likelihood", (n, s)), mode="clip")
    alpha, scale = scaled_forward(block.layout, initial, likelihood, steps, block.step_pair,
                                  block.buffer("alpha", (n, s)), block.buffer("scale", (n,)))
    with np.errstate(divide="ignore", invalid="ignore"):
        log_scale = np.log(np.where(scale > 0, scale, 0.0))
    case_ll = np.bincount(block.case_of_row, weights=log_scale, minlength=plan.timelines.n_cases)
    total = float(log_scale.sum())
    if not gradient or not np.isfinite(total):
        return _BlockSums(total, case_ll, None, None, None)
    # backward; the likelihood buffer receives b_j = e_j * beta_j / c_j row by row (rows after position 0)
    beta = scaled_backward(block.layout, likelihood, scale, steps, block.step_pair,
                           block.buffer("beta", (n, s)), weighted=likelihood)
    weights, counts = _pair_sums(block, alpha, beta, likelihood, steps.shape[0], evidence_table.shape[0])
    smoothed = alpha   # alpha * beta, written in place by _pair_sums
    first = int(block.layout.block_sizes[0]) if block.layout.n_positions else 0
    return _BlockSums(total, case_ll, weights, counts, smoothed[:first].sum(axis=0),
                      smoothed.copy() if want_smoothed else None)


#: Steps gathered at a time for the per-pair sums.
_PAIR_CHUNK_STEPS = 1 << 16


def _pair_sums(block: CaseBlock, alpha: np.ndarray, beta: np.ndarray, weighted: np.ndarray, n_pairs: int,
               n_patterns: int) -> tuple:
    """Per-pair step weights and per-pattern smoothed counts of one block.

    ``weights[p] = sum over the steps of pair p of a_{j-1} b_j'`` (``d log L / d M_p``, ``b_j`` in
    ``weighted``); then ``alpha`` is overwritten with the smoothed probabilities ``alpha * beta``,
    summed per evidence pattern into ``counts`` (J, S).
    """
    s = alpha.shape[1]
    weights = np.zeros((n_pairs, s, s))
    size = block.steps_by_pair.size
    width = max(min(_PAIR_CHUNK_STEPS, size), 1)
    a_chunk, b_chunk = block.buffer("a_sorted", (width, s)), block.buffer("b_sorted", (width, s))
    product = np.empty((s, s))
    starts = block.pair_starts
    for lo in range(0, size, width):
        hi = min(lo + width, size)
        # the steps in pair order, a chunk at a time (a few MB however large the caseload)
        np.take(alpha, block.previous_by_pair[lo:hi], axis=0, out=a_chunk[:hi - lo], mode="clip")
        np.take(weighted, block.steps_by_pair[lo:hi], axis=0, out=b_chunk[:hi - lo], mode="clip")
        first, last = np.searchsorted(starts, lo, side="right") - 1, np.searchsorted(starts, hi, side="left")
        for p in range(int(first), int(last)):
            begin, end = max(int(starts[p]), lo) - lo, min(int(starts[p + 1]), hi) - lo
            if end > begin:
                np.matmul(a_chunk[begin:end].T, b_chunk[begin:end], out=product)
                weights[p] += product
    smoothed = np.multiply(alpha, beta, out=alpha)
    counts = np.empty((n_patterns, s))
    for stage in range(s):
        counts[:, stage] = np.bincount(block.evidence, weights=smoothed[:, stage], minlength=n_patterns)
    return weights, counts


def _run_blocks(plan: LikelihoodPlan, *args) -> list:
    """:func:`_block_pass` over every block, in parallel threads when there are several."""
    if len(plan.blocks) == 1:
        return [_block_pass(plan, plan.blocks[0], *args)]
    with ThreadPoolExecutor(max_workers=len(plan.blocks), thread_name_prefix="caseview-likelihood") as pool:
        futures = [pool.submit(_block_pass, plan, block, *args) for block in plan.blocks]
        return [future.result() for future in futures]


def evaluate(plan: LikelihoodPlan, theta: np.ndarray, gradient: bool = True, method: str = "auto",
             smoothed: bool = False) -> Evaluation:
    """Log-likelihood (and gradient with respect to ``theta``) over the caseload of ``plan``.

    Parameters
    ----------
    plan : LikelihoodPlan
    theta : ndarray, shape (n_free,)
    gradient : bool
    method : {"auto", "eigen", "expm"}
        Matrix-exponential path (``"expm"`` forces the scipy/Van Loan fallback).
    smoothed : bool
        Also return the smoothed stage probabilities (with the gradient only).

    Returns
    -------
    Evaluation
    """
    spec = plan.spec
    arrays = spec.arrays(np.asarray(theta, dtype=float))
    generator_parts, contact_rates, cache, p_matrices, steps = _step_matrices(plan, arrays, method)
    with plan.lock:  # the blocks' buffers are reused between evaluations
        sums = _run_blocks(plan, arrays.initial, _evidence_table(plan, arrays), steps, gradient, smoothed)
    total = float(sum(part.log_likelihood for part in sums))
    case_ll = sums[0].case_log_likelihood
    for part in sums[1:]:
        case_ll = case_ll + part.case_log_likelihood
    if not gradient or not np.isfinite(total):
        return Evaluation(total, None if not gradient else np.full(spec.n_free, np.nan), case_ll)
    grad = np.zeros(spec.n_free)
    s = plan.n_stages

    # --- transitions: dl/dM aggregated per distinct pair
    if plan.n_pairs:
        weights = sum(part.step_weights for part in sums)
        q, q_off, src, dst = generator_parts
        _transition_gradient(plan, spec, cache, p_matrices, q, q_off, src, dst, weights, grad, arrays,
                             contact_rates)

    # --- observation probabilities: expected counts N[s, k]
    pattern_counts = sum(part.evidence_counts for part in sums)            # (J, S)
    for c, rows_spec in enumerate(spec.emission_rows):
        if all(r is None for r in rows_spec):
            continue
        counts = pattern_counts.T @ plan.evidence_one_hot[c]                 # (S, C)
        for r, row in enumerate(rows_spec):
            if row is not None:
                grad[row.slots] += counts[r, row.free] - arrays.emissions[c][r, row.free] * counts[r, row.support].sum()
    if spec.initial_row is not None:
        row = spec.initial_row
        first = sum(part.initial_counts for part in sums)
        grad[row.slots] += first[row.free] - arrays.initial[row.free] * first[row.support].sum()
    smoothed_rows = None
    if smoothed:
        smoothed_rows = np.empty((plan.timelines.n_contacts, s))
        for block, part in zip(plan.blocks, sums):
            smoothed_rows[block.layout.order] = part.smoothed
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
