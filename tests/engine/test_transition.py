"""Transition matrices P(t) = expm(Q t): closed forms, ODE reference, both numerical paths."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from scipy.integrate import solve_ivp

from hmm.transition import (distinct_transition_matrices, eigen_path_is_safe, transition_matrices,
                            transition_matrix)

from engine_helpers import random_generator

PATHS = ["eigen", "expm"]


@pytest.mark.parametrize("method", PATHS + ["auto"])
def test_two_state_closed_form(method):
    # Ross, Introduction to Probability Models, ch. 6 (two-state chain):
    # P11(t) = mu/(lambda+mu) + lambda/(lambda+mu) exp(-(lambda+mu) t), lambda = q12, mu = q21.
    q12, q21, t = 0.35, 0.20, 5.0
    q = np.array([[-q12, q12], [q21, -q21]])
    p = transition_matrix(q, t, method=method)
    total = q12 + q21
    p11 = q21 / total + q12 / total * np.exp(-total * t)
    np.testing.assert_allclose(p[0], [p11, 1 - p11], atol=1e-12)
    # Value quoted in the brief, rounded to 6 decimals (hand-computed from the formula above).
    np.testing.assert_allclose(p[0], [0.404318, 0.595682], atol=5e-7)
    p22 = q12 / total + q21 / total * np.exp(-total * t)
    np.testing.assert_allclose(p[1], [1 - p22, p22], atol=1e-12)


def test_progressive_equal_rates_uses_expm_fallback_and_matches_closed_form():
    # Progressive chain 1 -> 2 -> 3 with equal rates lambda: the generator is defective.
    # Closed form (Poisson process counts; Ross ch. 5-6): p11 = e^{-lt}, p12 = l t e^{-lt},
    # p13 = 1 - p11 - p12. With l = 0.5, t = 2: (0.367879, 0.367879, 0.264241).
    lam, t = 0.5, 2.0
    q = np.array([[-lam, lam, 0.0], [0.0, -lam, lam], [0.0, 0.0, 0.0]])
    assert not eigen_path_is_safe(q)
    with pytest.raises(ValueError, match="not safe"):
        transition_matrix(q, t, method="eigen")
    p = transition_matrix(q, t, method="auto")
    expected = [np.exp(-lam * t), lam * t * np.exp(-lam * t), 1 - np.exp(-lam * t) * (1 + lam * t)]
    np.testing.assert_allclose(p[0], expected, atol=1e-12)
    np.testing.assert_allclose(p[0], [0.367879, 0.367879, 0.264241], atol=5e-7)
    np.testing.assert_allclose(p, scipy.linalg.expm(q * t), atol=1e-14)


def test_nearly_equal_rates_fall_back():
    # Rates differing by 1e-12 are numerically defective; the eigen path must not be trusted.
    q = np.array([[-0.5, 0.5, 0.0], [0.0, -0.5 - 1e-12, 0.5 + 1e-12], [0.0, 0.0, 0.0]])
    assert not eigen_path_is_safe(q)
    np.testing.assert_allclose(transition_matrix(q, 3.0), scipy.linalg.expm(q * 3.0), atol=1e-12)


@pytest.mark.parametrize("method", PATHS)
def test_against_kolmogorov_forward_equations(method, rng):
    # Reference: scipy.integrate.solve_ivp on dP/dt = P Q, P(0) = I (Kolmogorov forward equations).
    for n_stages in (2, 3, 5):
        q = random_generator(rng, n_stages, 0.01, 0.6)
        assert eigen_path_is_safe(q)  # random rates: distinct eigenvalues, well-conditioned
        times = np.array([0.0, 0.3, 2.0, 7.5, 40.0])

        def rhs(_t, y):
            return (y.reshape(n_stages, n_stages) @ q).ravel()

        ode = solve_ivp(rhs, (0, times[-1]), np.eye(n_stages).ravel(), t_eval=times,
                        rtol=1e-11, atol=1e-13, method="DOP853")
        p = transition_matrices(q[None], times, np.zeros(times.size, int), method=method)
        for i in range(times.size):
            np.testing.assert_allclose(p[i], ode.y[:, i].reshape(n_stages, n_stages), atol=1e-8)


@pytest.mark.parametrize("method", PATHS)
def test_gap_zero_is_identity_exactly(method):
    q = np.array([[-0.3, 0.2, 0.1], [0.05, -0.15, 0.1], [0.0, 0.0, 0.0]])
    p = transition_matrices(q[None], np.array([0.0, 1.0, 0.0]), np.zeros(3, int), method=method)
    assert np.array_equal(p[0], np.eye(3)) and np.array_equal(p[2], np.eye(3))


@pytest.mark.parametrize("method", PATHS)
def test_long_gaps_and_wide_rate_range(method):
    # Rates across six orders of magnitude, gaps up to 20,000 days; reference scipy.linalg.expm.
    q = np.array([[-1.0 - 1e-6, 1.0, 1e-6], [2e-6, -2e-6 - 1e-3, 1e-3], [0.0, 0.0, 0.0]])
    gaps = np.array([1e-3, 1.0, 365.0, 5000.0, 20000.0])
    p = transition_matrices(q[None], gaps, np.zeros(gaps.size, int), method=method)
    reference = scipy.linalg.expm(q[None] * gaps[:, None, None])
    np.testing.assert_allclose(p, reference, atol=1e-9)
    assert np.all(p >= 0) and np.allclose(p.sum(axis=2), 1.0, atol=1e-13)


def test_distinct_pairs_computed_once_and_scattered(rng):
    generators = np.stack([random_generator(rng, 4) for _ in range(3)])
    gaps = rng.choice([0.0, 1.0, 7.0, 30.0], size=200)
    index = rng.integers(0, 3, size=200)
    matrices, where = distinct_transition_matrices(generators, gaps, index)
    assert matrices.shape[0] == len(set(zip(index.tolist(), gaps.tolist())))
    full = transition_matrices(generators, gaps, index)
    reference = scipy.linalg.expm(generators[index] * gaps[:, None, None])  # scipy reference
    np.testing.assert_allclose(full, reference, atol=1e-11)
    np.testing.assert_array_equal(full, matrices[where])


def test_mixed_safe_and_unsafe_generators_in_one_call():
    safe = np.array([[-0.3, 0.3], [0.1, -0.1]])
    defective = np.array([[-0.5, 0.5, 0.0], [0.0, -0.5, 0.5], [0.0, 0.0, 0.0]])
    padded = np.zeros((3, 3))
    padded[:2, :2] = safe  # third stage unreachable and absorbing
    generators = np.stack([padded, defective])
    assert eigen_path_is_safe(generators).shape == (2,)
    gaps = np.array([1.0, 2.0, 3.0, 4.0])
    index = np.array([0, 1, 0, 1])
    p = transition_matrices(generators, gaps, index)
    np.testing.assert_allclose(p, scipy.linalg.expm(generators[index] * gaps[:, None, None]), atol=1e-12)


def test_bad_input_rejected():
    q = np.array([[-0.3, 0.3], [0.1, -0.1]])
    with pytest.raises(ValueError, match="gaps"):
        transition_matrices(q[None], np.array([-1.0]), np.array([0]))
    with pytest.raises(ValueError, match="generator_index"):
        transition_matrices(q[None], np.array([1.0]), np.array([2]))
    with pytest.raises(ValueError, match="method"):
        transition_matrices(q[None], np.array([1.0]), np.array([0]), method="fast")
