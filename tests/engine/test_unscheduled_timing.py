"""Informative timing of unscheduled contacts: the engine against independent computations.

The model (hmm.inference docstring): between contacts the stage evolves under Q while unscheduled
contacts arrive at rate lambda_s of the current stage; the interval matrix is expm((Q - Lambda) gap),
times Lambda when the later contact is unscheduled. The checks here do not use a matrix exponential:
they solve the Kolmogorov forward equation dp/dt = p (Q - Lambda) with scipy.integrate.solve_ivp,
integrate over jump times with scipy.integrate.quad, or enumerate stage paths.
"""

from __future__ import annotations

import itertools
from dataclasses import replace

import numpy as np
import pytest
import scipy.integrate
from engine_helpers import model_from_matrices

from hmm import (Timelines, forward, most_likely_path, reach_probability, simulate_caseload,
                 smoothed_probabilities, stage_probabilities_now, transition_matrices)
from hmm.model import ModelError, UnscheduledContacts

Q3 = np.array([[-0.03, 0.02, 0.01], [0.01, -0.05, 0.04], [0.0, 0.0, 0.0]])
EMISSION = np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])
RATES = np.array([0.01, 0.06, 0.02])


def timing_model(rates=RATES, effects=None, covariates=(), q=Q3, exact_entry=()):
    effects_q = {(0, 1): {"alone": 0.4}} if covariates else None
    base = model_from_matrices(q, [0.6, 0.3, 0.1], [EMISSION], exact_entry=exact_entry, effects=effects_q,
                               covariates=covariates)
    return replace(base, unscheduled_contacts=UnscheduledContacts(np.asarray(rates, float), dict(effects or {})))


def tiny_caseload(with_covariate=False):
    """Three cases with scheduled and unscheduled contacts (0/1 covariate when asked)."""
    times = [[0.0, 12.0, 30.0, 31.5, 70.0], [5.0, 9.0, 40.0], [0.0]]
    kinds = [[0, 1, 0, 1, 1], [0, 1, 0], [1]]    # the first contact's kind is irrelevant (conditioned on)
    obs = [[0, 1, -1, 1, 0], [1, 0, 1], [0]]
    covs = [[0, 1, 1, 0, 0], [1, 1, 0], [0]]
    case = np.concatenate([np.full(len(t), i) for i, t in enumerate(times)])
    n = case.size
    covariates = np.concatenate(covs).astype(float).reshape(n, 1) if with_covariate else np.zeros((n, 0))
    return Timelines.from_contacts(case, np.concatenate(times), np.concatenate(obs).reshape(n, 1),
                                   np.ones((n, 3), bool), covariates, unscheduled=np.concatenate(kinds) > 0)


def _quiet_matrix_by_ode(q_sub: np.ndarray, gap: float) -> np.ndarray:
    """Row r: solution at ``gap`` of dp/dt = p (Q - Lambda), p(0) = e_r (scipy.integrate.solve_ivp, RK45)."""
    n = q_sub.shape[0]
    if gap == 0:
        return np.eye(n)
    out = np.empty((n, n))
    for r in range(n):
        sol = scipy.integrate.solve_ivp(lambda t, p: p @ q_sub, (0.0, gap), np.eye(n)[r], rtol=1e-11, atol=1e-13)
        out[r] = sol.y[:, -1]
    return out


def _reference_steps(model, timelines):
    """Per contact after a case's first: the step matrix from the ODE solve (with Lambda columns when unscheduled)."""
    steps = {}
    for i in range(timelines.n_cases):
        for j in range(timelines.offsets[i] + 1, timelines.offsets[i + 1]):
            x = timelines.covariates[j - 1]
            q = model.generator(x)
            lam = model.unscheduled_contacts.rates_at(x[None, :], model.covariates)[0]
            step = _quiet_matrix_by_ode(q - np.diag(lam), timelines.times[j] - timelines.times[j - 1])
            steps[j] = step * lam[None, :] if timelines.unscheduled[j] else step
    return steps


def _reference_log_likelihood(model, timelines):
    """Per case: initial' diag(e_0) M_1 diag(e_1) ... 1 with ODE step matrices (an independent forward pass)."""
    steps = _reference_steps(model, timelines)
    table = model.channels[0].probabilities
    out = []
    for i in range(timelines.n_cases):
        rows = range(timelines.offsets[i], timelines.offsets[i + 1])
        vector = None
        for j in rows:
            code = timelines.observations[j, 0]
            e = table[:, code] if code >= 0 else np.ones(model.n_stages)
            vector = model.initial * e if vector is None else (vector @ steps[j]) * e
        out.append(np.log(vector.sum()))
    return np.array(out)


@pytest.mark.parametrize("method", ["eigen", "expm"])
@pytest.mark.parametrize("with_covariate", [False, True])
def test_log_likelihood_matches_kolmogorov_forward_solve(method, with_covariate):
    covariates = ("alone",) if with_covariate else ()
    model = timing_model(effects={"alone": -0.5} if with_covariate else None, covariates=covariates)
    timelines = tiny_caseload(with_covariate)
    expected = _reference_log_likelihood(model, timelines)  # scipy.integrate.solve_ivp on Q - Lambda
    result = forward(model, timelines, method=method)
    np.testing.assert_allclose(result.log_likelihood, expected, rtol=1e-8, atol=1e-9)
    # one case at a time gives the same numbers as the whole caseload at once
    for i in range(timelines.n_cases):
        single = forward(model, timelines.subset([i]), method=method).log_likelihood[0]
        assert single == pytest.approx(expected[i], rel=1e-8)


def test_quiet_interval_matches_integration_over_paths():
    """Two stages, one jump 0 -> 1 at rate q: P(no unscheduled contact in [0, T], end in 1 | start 0)
    = integral_0^T exp(-(q + l0) u) q exp(-l1 (T - u)) du (integration over the jump time, scipy.integrate.quad)."""
    q, l0, l1, gap = 0.02, 0.01, 0.07, 45.0
    model = replace(model_from_matrices([[-q, q], [0.0, 0.0]], [1.0, 0.0], [np.eye(2)]),
                    unscheduled_contacts=UnscheduledContacts(np.array([l0, l1])))
    moved, _ = scipy.integrate.quad(lambda u: np.exp(-(q + l0) * u) * q * np.exp(-l1 * (gap - u)), 0.0, gap)
    stayed = np.exp(-(q + l0) * gap)
    for kind, factor in ((False, 1.0), (True, l1)):
        timelines = Timelines.from_contacts([0, 0], [0.0, gap], np.array([[0], [1]]), np.ones((2, 2), bool),
                                            np.zeros((2, 0)), unscheduled=[False, kind])
        # recorded category 1 at the second contact means stage 1 (identity emissions)
        assert forward(model, timelines).log_likelihood[0] == pytest.approx(np.log(moved * factor), rel=1e-10)
        timelines = Timelines.from_contacts([0, 0], [0.0, gap], np.array([[0], [0]]), np.ones((2, 2), bool),
                                            np.zeros((2, 0)), unscheduled=[False, kind])
        assert forward(model, timelines).log_likelihood[0] == pytest.approx(np.log(stayed * (l0 if kind else 1)),
                                                                            rel=1e-10)


def test_smoothing_and_viterbi_match_path_enumeration():
    model = timing_model()
    timelines = tiny_caseload()
    steps = _reference_steps(model, timelines)  # solve_ivp step matrices
    table = model.channels[0].probabilities
    smoothed = smoothed_probabilities(model, timelines)
    path = most_likely_path(model, timelines)
    for i in range(timelines.n_cases):
        rows = list(range(timelines.offsets[i], timelines.offsets[i + 1]))
        weights = {}
        for stages in itertools.product(range(3), repeat=len(rows)):
            w = model.initial[stages[0]]
            for position, (j, s) in enumerate(zip(rows, stages)):
                code = timelines.observations[j, 0]
                w *= table[s, code] if code >= 0 else 1.0
                if position:
                    w *= steps[j][stages[position - 1], s]
            weights[stages] = w
        total = sum(weights.values())
        for position, j in enumerate(rows):
            marginal = [sum(w for p, w in weights.items() if p[position] == s) / total for s in range(3)]
            np.testing.assert_allclose(smoothed[j], marginal, atol=1e-9)
        best = max(weights, key=weights.get)
        assert tuple(path[rows]) == best


def test_now_uses_the_quiet_time_and_forecasts_use_q_alone():
    model = timing_model()
    timelines = tiny_caseload()
    as_of = 100.0
    result = forward(model, timelines)
    now = stage_probabilities_now(model, timelines, as_of, filtered=result.filtered)
    last = timelines.last_index
    for i, j in enumerate(last):
        q_sub = model.generator() - np.diag(RATES)
        carried = result.filtered[j] @ _quiet_matrix_by_ode(q_sub, as_of - timelines.times[j])  # solve_ivp
        np.testing.assert_allclose(now[i], carried / carried.sum(), atol=1e-9)
    # the quiet time favours the stage with the fewest unscheduled contacts
    blind_now = stage_probabilities_now(replace(model, unscheduled_contacts=None), timelines, as_of,
                                        filtered=result.filtered)
    assert np.all(now[:, 0] > blind_now[:, 0])
    # reach beyond the as-of date uses Q alone: the same as the timing-blind model from the same start
    blind = replace(model, unscheduled_contacts=None)
    target = np.array([False, True, False])
    np.testing.assert_array_equal(reach_probability(model, now, np.zeros((3, 0)), 30.0, target),
                                  reach_probability(blind, now, np.zeros((3, 0)), 30.0, target))


def test_equal_rates_in_every_stage_say_nothing_about_the_stage():
    """With lambda the same in every stage the timing factor is common to all stages: stage estimates are
    those of the timing-blind model and the log-likelihood differs by the Poisson term (common practice,
    no source: a factor that does not depend on the hidden stage cancels in every posterior)."""
    equal = timing_model(rates=[0.03, 0.03, 0.03])
    blind = replace(equal, unscheduled_contacts=None)
    timelines = tiny_caseload()
    np.testing.assert_allclose(smoothed_probabilities(equal, timelines), smoothed_probabilities(blind, timelines),
                               atol=1e-12)
    np.testing.assert_allclose(stage_probabilities_now(equal, timelines, 90.0),
                               stage_probabilities_now(blind, timelines, 90.0), atol=1e-12)
    span = np.array([70.0, 35.0, 0.0])   # time from first to last contact of each case
    n_unscheduled = np.array([3, 1, 0])  # unscheduled contacts after the first
    poisson = n_unscheduled * np.log(0.03) - 0.03 * span
    np.testing.assert_allclose(forward(equal, timelines).log_likelihood - forward(blind, timelines).log_likelihood,
                               poisson, atol=1e-10)


def test_without_the_block_the_contact_kind_changes_nothing():
    model = replace(timing_model(), unscheduled_contacts=None)
    timelines = tiny_caseload()
    unmarked = Timelines(timelines.offsets, timelines.times, timelines.observations, timelines.allowed_stages,
                         timelines.covariates)
    a, b = forward(model, timelines), forward(model, unmarked)
    np.testing.assert_array_equal(a.log_likelihood, b.log_likelihood)
    np.testing.assert_array_equal(a.filtered, b.filtered)


@pytest.mark.parametrize("method", ["eigen", "expm"])
def test_sub_generator_matrices_are_sub_stochastic_on_both_paths(method):
    q_sub = Q3 - np.diag(RATES)
    gaps = np.array([0.0, 1.0, 30.0, 365.0])
    matrices = transition_matrices(q_sub[None], gaps, np.zeros(4, dtype=np.int64), method=method,
                                   sub_generators=True)
    for gap, matrix in zip(gaps, matrices):
        np.testing.assert_allclose(matrix, _quiet_matrix_by_ode(q_sub, gap), atol=1e-9)  # solve_ivp
    assert np.all(matrices[1:].sum(axis=2) < 1.0)


def test_exact_entry_after_a_quiet_interval():
    """Entry into an absorbing exact-entry stage: density (expm((Q - Lambda) gap) Q)[:, s] (no Lambda factor)."""
    model = timing_model(exact_entry=(2,), q=np.array([[-0.03, 0.02, 0.01], [0.01, -0.05, 0.04], [0, 0, 0]]),
                         rates=[0.01, 0.06, 0.0])
    allowed = np.ones((2, 3), bool)
    allowed[1] = [False, False, True]
    timelines = Timelines.from_contacts([0, 0], [0.0, 20.0], np.array([[0], [-1]]), allowed, np.zeros((2, 0)),
                                        unscheduled=[False, True])
    q_sub = model.generator() - np.diag([0.01, 0.06, 0.0])
    start = model.initial * EMISSION[:, 0]
    density = (start @ _quiet_matrix_by_ode(q_sub, 20.0) @ model.generator())[2]  # solve_ivp
    assert forward(model, timelines).log_likelihood[0] == pytest.approx(np.log(density), rel=1e-9)


def test_simulator_draws_unscheduled_contacts_at_the_stage_rate(rng):
    """Everyone stays in stage 1 (absorbing, rate 0.05 per day): unscheduled contacts per day ~ 0.05
    (Poisson count; 5 standard errors)."""
    model = replace(model_from_matrices([[-0.01, 0.01], [0.0, 0.0]], [0.0, 1.0], [EMISSION[:2]]),
                    unscheduled_contacts=UnscheduledContacts(np.array([0.002, 0.05])))
    schedule = [np.arange(0.0, 400.0, 70.0) for _ in range(300)]
    sim = simulate_caseload(model, schedule, np.zeros((300, 0)), rng, end_times=np.full(300, 400.0))
    t = sim.timelines
    count = int(t.unscheduled.sum())
    exposure = 300 * 400.0
    assert abs(count - 0.05 * exposure) < 5 * np.sqrt(0.05 * exposure)
    # the scheduled contacts are all kept, at their dates
    scheduled = t.times[~t.unscheduled]
    np.testing.assert_array_equal(np.sort(scheduled), np.sort(np.concatenate(schedule)))
    assert t.times.max() < 400.0
    assert np.all(sim.true_stages == 1)


def test_unscheduled_block_is_validated():
    base = replace(timing_model(), unscheduled_contacts=None)
    with pytest.raises(ModelError, match="one per stage"):
        replace(base, unscheduled_contacts=UnscheduledContacts(np.array([0.1, 0.2])))
    with pytest.raises(ModelError, match="non-negative"):
        replace(base, unscheduled_contacts=UnscheduledContacts(np.array([0.1, -0.2, 0.0])))
    with pytest.raises(ModelError, match="unknown covariate"):
        replace(base, unscheduled_contacts=UnscheduledContacts(np.array([0.1, 0.2, 0.0]), {"age": 0.1}))


def test_observation_end_adds_the_quiet_tail():
    """A blank scheduled contact at the end of observation multiplies each case's likelihood by
    P(no unscheduled contact from its last contact to the end) = alpha_last expm((Q - Lambda) gap) 1
    (the matrix from solve_ivp)."""
    model = timing_model()
    timelines = tiny_caseload()
    extended = timelines.with_observation_end(100.0)
    assert extended.n_contacts == timelines.n_contacts + 3 and not extended.unscheduled[extended.last_index].any()
    result = forward(model, timelines)
    q_sub = model.generator() - np.diag(RATES)
    tail = [np.log((result.filtered[j] @ _quiet_matrix_by_ode(q_sub, 100.0 - timelines.times[j])).sum())
            for j in timelines.last_index]
    np.testing.assert_allclose(forward(model, extended).log_likelihood, result.log_likelihood + tail, rtol=1e-9)


@pytest.mark.parametrize("spread", [0.0, 1e-10, 1e-3])
def test_defective_chain_sub_generator_conditioning(spread):
    """A progressive chain with equal rates is defective; Q - Lambda with equal lambdas stays defective and
    must take the expm fallback; nearly equal lambdas are (nearly) defective too. Either way the matrices
    agree with scipy.linalg.expm (Al-Mohy & Higham 2009) of the sub-generator."""
    import scipy.linalg

    from hmm import eigen_path_is_safe

    q = np.array([[-0.02, 0.02, 0.0], [0.0, -0.02, 0.02], [0.0, 0.0, 0.0]])
    q_sub = q - np.diag([0.01, 0.01 + spread, 0.01])
    if spread <= 1e-10:
        assert not eigen_path_is_safe(q_sub)
    gaps = np.array([7.0, 90.0, 400.0])
    auto = transition_matrices(q_sub[None], gaps, np.zeros(3, dtype=np.int64), sub_generators=True)
    for gap, matrix in zip(gaps, auto):
        np.testing.assert_allclose(matrix, scipy.linalg.expm(q_sub * gap), atol=1e-10)
