"""Forward-backward, Viterbi, now-probabilities and forecasts: hand-worked values and batching."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from engine_helpers import model_from_matrices, random_emissions, random_generator
from hmm import (MISSING, Timelines, backward, contact_likelihoods, forecast, forward, most_likely_path,
                 occupancy_over_time, reach_probability, smoothed_probabilities, stage_probabilities_now)


def _random_caseload(rng, n_cases, n_stages=4, exact_entry=True):
    """Irregular gaps, two covariates, missing values, some known stages, exact entries."""
    q = random_generator(rng, n_stages, 0.005, 0.08)
    q[-1] = 0.0  # last stage absorbing
    effects = {(0, 1): {"x": 0.7, "z": -0.3}, (1, 2): {"z": 0.5}}
    model = model_from_matrices(q, rng.dirichlet(np.ones(n_stages - 1)).tolist() + [0.0],
                                [random_emissions(rng, n_stages, 3), random_emissions(rng, n_stages, 2)],
                                exact_entry=(n_stages - 1,) if exact_entry else (), effects=effects,
                                covariates=("x", "z"))
    lengths = rng.integers(1, 7, size=n_cases)
    n = lengths.sum()
    case = np.repeat(np.arange(n_cases), lengths)
    times = np.concatenate([np.cumsum(rng.choice([0.0, 3.0, 14.0, 30.0, 90.0], size=m)) for m in lengths])
    observations = np.column_stack([rng.integers(-1, 3, n), rng.integers(-1, 2, n)])
    allowed = np.ones((n, n_stages), bool)
    known = rng.random(n) < 0.05
    allowed[known] = False
    allowed[known, rng.integers(0, n_stages - 1, known.sum())] = True
    last = np.concatenate([[False], case[1:] != case[:-1]])[1:].tolist() + [True]
    entry = np.array(last) & (rng.random(n) < 0.3) & exact_entry & (np.r_[0, np.diff(case)] == 0)
    allowed[entry] = False
    allowed[entry, n_stages - 1] = True
    observations[entry] = MISSING
    covariates = np.column_stack([rng.integers(0, 2, n), rng.choice([0.0, 1.5], n)])
    return model, Timelines.from_contacts(case, times, observations, allowed, covariates)


@pytest.mark.parametrize("method", ["eigen", "expm"])
def test_batched_equals_one_case_at_a_time(method, rng):
    model, timelines = _random_caseload(rng, 40)
    whole = forward(model, timelines, method=method)
    smoothed = smoothed_probabilities(model, timelines, method=method)
    path = most_likely_path(model, timelines, method=method)
    for i in range(timelines.n_cases):
        one = timelines.subset([i])
        rows = slice(timelines.offsets[i], timelines.offsets[i + 1])
        single = forward(model, one, method=method)
        assert whole.log_likelihood[i] == pytest.approx(single.log_likelihood[0], rel=1e-12, abs=1e-12)
        np.testing.assert_allclose(whole.filtered[rows], single.filtered, atol=1e-12)
        np.testing.assert_allclose(smoothed[rows], smoothed_probabilities(model, one, method=method), atol=1e-12)
        np.testing.assert_array_equal(path[rows], most_likely_path(model, one, method=method))
    assert np.all(np.isfinite(whole.log_likelihood))
    np.testing.assert_allclose(smoothed.sum(axis=1), 1.0, atol=1e-12)


def test_brute_force_enumeration_of_paths(rng):
    # Reference: direct sum over all S^n hidden paths (definition of the HMM likelihood) with
    # P from scipy.linalg.expm; irregular gaps and piecewise-constant covariates.
    model, timelines = _random_caseload(rng, 1, n_stages=3, exact_entry=False)
    while timelines.n_contacts < 4:
        model, timelines = _random_caseload(rng, 1, n_stages=3, exact_entry=False)
    likelihood = contact_likelihoods(model, timelines)
    n, s = likelihood.shape
    steps = [scipy.linalg.expm(model.generator(timelines.covariates[j]) * (timelines.times[j + 1] - timelines.times[j]))
             for j in range(n - 1)]
    joint = {}
    for path in np.ndindex(*(s,) * n):
        p = model.initial[path[0]] * likelihood[0, path[0]]
        for j in range(1, n):
            p *= steps[j - 1][path[j - 1], path[j]] * likelihood[j, path[j]]
        joint[path] = p
    total = sum(joint.values())
    result = forward(model, timelines)
    assert result.log_likelihood[0] == pytest.approx(np.log(total), rel=1e-10)
    smoothed = smoothed_probabilities(model, timelines)
    for j in range(n):
        marginal = [sum(v for k, v in joint.items() if k[j] == r) / total for r in range(s)]
        np.testing.assert_allclose(smoothed[j], marginal, atol=1e-10)
    best = max(joint, key=joint.get)
    np.testing.assert_array_equal(most_likely_path(model, timelines), best)


def _sylvester_expm_2x2(a, t):
    # Sylvester's formula for a 2x2 matrix with distinct eigenvalues l1, l2 (Moler & Van Loan 2003,
    # "Nineteen dubious ways", method 13): e^{At} = (e^{l1 t}(A - l2 I) - e^{l2 t}(A - l1 I)) / (l1 - l2).
    tr, det = np.trace(a), np.linalg.det(a)
    disc = np.sqrt(tr * tr / 4 - det)
    l1, l2 = tr / 2 + disc, tr / 2 - disc
    eye = np.eye(2)
    return (np.exp(l1 * t) * (a - l2 * eye) - np.exp(l2 * t) * (a - l1 * eye)) / (l1 - l2)


@pytest.mark.parametrize("method", ["eigen", "expm"])
def test_exact_entry_hand_worked(method):
    # Two transient stages and one absorbing stage entered on a known date.
    a, b, c, d = 0.04, 0.01, 0.03, 0.02
    q = np.array([[-a - b, a, b], [c, -c - d, d], [0.0, 0.0, 0.0]])
    emission = np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])
    initial = np.array([0.6, 0.4, 0.0])
    model = model_from_matrices(q, initial, [emission], exact_entry=(2,))
    times = np.array([0.0, 10.0, 25.0])
    observations = np.array([[0], [1], [MISSING]])
    allowed = np.array([[1, 1, 1], [1, 1, 1], [0, 0, 1]], bool)
    timelines = Timelines.from_contacts(np.zeros(3, int), times, observations, allowed, np.zeros((3, 0)))
    # Direct formula: L = sum_i pi_i e_i(o0) sum_j P_ij(10) e_j(o1) sum_r P_jr(15) q_r2, P on the
    # transient block from Sylvester's formula (transient-to-transient probabilities only).
    p1 = _sylvester_expm_2x2(q[:2, :2], 10.0)
    p2 = _sylvester_expm_2x2(q[:2, :2], 15.0)
    alpha0 = initial[:2] * emission[:2, 0]
    alpha1 = (alpha0 @ p1) * emission[:2, 1]
    density = p2 @ q[:2, 2]                       # per day
    expected = alpha1 @ density
    result = forward(model, timelines, method=method)
    assert result.log_likelihood[0] == pytest.approx(np.log(expected), rel=1e-12)
    np.testing.assert_allclose(result.filtered[2], [0, 0, 1], atol=1e-15)
    smoothed = smoothed_probabilities(model, timelines, method=method)
    np.testing.assert_allclose(smoothed[1, :2], alpha1 * density / expected, atol=1e-12)
    assert smoothed[1, 2] == 0.0
    # Without exact entry the same contact means "in stage 2 by day 25" - a probability, not a density.
    plain = model_from_matrices(q, initial, [emission])
    alpha1_all = (initial * emission[:, 0]) @ scipy.linalg.expm(q * 10.0) * emission[:, 1]
    by_day_25 = alpha1_all @ scipy.linalg.expm(q * 15.0)[:, 2]
    assert forward(plain, timelines).log_likelihood[0] == pytest.approx(np.log(by_day_25), rel=1e-10)


def test_covariates_of_earlier_contact_drive_the_step():
    q = np.array([[-0.1, 0.1], [0.05, -0.05]])
    model = model_from_matrices(q, [1.0, 0.0], [np.array([[0.9, 0.1], [0.2, 0.8]])],
                                effects={(0, 1): {"x": 1.0}}, covariates=("x",))
    timelines = Timelines.from_contacts(np.zeros(2, int), [0.0, 4.0], [[0], [1]], np.ones((2, 2), bool),
                                        [[1.0], [0.0]])
    step = scipy.linalg.expm(model.generator([1.0]) * 4.0)   # covariates of contact 0 (piecewise constant)
    expected = 0.9 * (step[0] @ np.array([0.1, 0.8]))
    assert forward(model, timelines).log_likelihood[0] == pytest.approx(np.log(expected), rel=1e-12)


def test_backward_at_last_contact_is_one(rng):
    model, timelines = _random_caseload(rng, 20)
    beta = backward(model, timelines)
    np.testing.assert_array_equal(beta[timelines.last_index], 1.0)


def test_now_forecast_and_occupancy_against_scipy(rng):
    model, timelines = _random_caseload(rng, 12, exact_entry=False)
    as_of = timelines.times.max() + 20.0
    now = stage_probabilities_now(model, timelines, as_of)
    filtered = forward(model, timelines).filtered
    last = timelines.last_index
    horizon = 60.0
    days = np.array([0.0, 7.0, 30.0, 365.0])
    ahead = forecast(model, now, timelines.covariates[last], horizon)
    occupancy = occupancy_over_time(model, now, timelines.covariates[last], days)
    follow_up = np.array([False, True, True, False])
    reach_set = reach_probability(model, now, timelines.covariates[last], horizon, follow_up)
    for i, row in enumerate(last):
        q = model.generator(timelines.covariates[row])
        # scipy.linalg.expm reference for propagation.
        np.testing.assert_allclose(now[i], filtered[row] @ scipy.linalg.expm(q * (as_of - timelines.times[row])),
                                   atol=1e-12)
        np.testing.assert_allclose(ahead.at_horizon[i], now[i] @ scipy.linalg.expm(q * horizon), atol=1e-12)
        for t, day in enumerate(days):
            np.testing.assert_allclose(occupancy[i, t], now[i] @ scipy.linalg.expm(q * day), atol=1e-12)
        for s in range(model.n_stages):
            absorbing = q.copy()
            absorbing[s] = 0.0
            np.testing.assert_allclose(ahead.reach[i, s], (now[i] @ scipy.linalg.expm(absorbing * horizon))[s],
                                       atol=1e-12)
        absorbing = q.copy()
        absorbing[follow_up] = 0.0
        assert reach_set[i] == pytest.approx((now[i] @ scipy.linalg.expm(absorbing * horizon))[follow_up].sum(),
                                             abs=1e-12)
    assert np.all(ahead.reach >= now - 1e-12)
    assert np.all(reach_set >= now[:, follow_up].sum(axis=1) - 1e-12)


def test_reach_two_state_closed_form():
    # Sojourn in stage 1 is exponential with rate q12 (Ross, ch. 6): P(reach 2 by H) = 1 - exp(-q12 H).
    q = np.array([[-0.02, 0.02], [0.5, -0.5]])
    model = model_from_matrices(q, [1.0, 0.0])
    result = forecast(model, np.array([[1.0, 0.0]]), np.zeros((1, 0)), 30.0)
    assert result.reach[0, 1] == pytest.approx(1 - np.exp(-0.02 * 30.0), rel=1e-12)
    assert result.reach[0, 0] == pytest.approx(1.0)
    assert result.at_horizon[0, 1] < result.reach[0, 1]


def test_now_before_last_contact_rejected(rng):
    model, timelines = _random_caseload(rng, 5)
    with pytest.raises(ValueError, match="before the last contact"):
        stage_probabilities_now(model, timelines, timelines.times.min() - 1.0)


def test_impossible_evidence_gives_minus_infinity():
    q = np.array([[-0.1, 0.1], [0.0, 0.0]])
    model = model_from_matrices(q, [1.0, 0.0], [np.array([[1.0, 0.0], [0.0, 1.0]])])
    timelines = Timelines.from_contacts([0, 0], [0.0, 5.0], [[1], [0]], np.ones((2, 2), bool), np.zeros((2, 0)))
    assert forward(model, timelines).log_likelihood[0] == -np.inf
