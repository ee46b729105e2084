"""The caseload log-likelihood and its analytic gradient."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.linalg

from fitting_helpers import progressive_equal_rates, simulate, three_stage_model
from hmm.fitting.expm_derivative import adjoint_derivative, decompose, pair_transition_matrices
from hmm.fitting.likelihood import evaluate, log_likelihood_and_gradient, prepare
from hmm.fitting.parameters import parameter_spec
from hmm.inference import forward
from hmm.timelines import Timelines


def _finite_difference(plan, theta, method, step=1e-5):
    out = np.zeros_like(theta)
    for i in range(theta.size):
        up, down = theta.copy(), theta.copy()
        up[i] += step
        down[i] -= step
        out[i] = (evaluate(plan, up, gradient=False, method=method).log_likelihood
                  - evaluate(plan, down, gradient=False, method=method).log_likelihood) / (2 * step)
    return out


@pytest.mark.parametrize("method", ["auto", "expm"])
@pytest.mark.parametrize("n_cases", [1, 40])
def test_gradient_matches_finite_differences_at_random_points(rng, method, n_cases):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=n_cases, n_contacts=8)
    spec = parameter_spec(model)
    plan = prepare(model, sim.timelines, spec)
    for _ in range(2):
        theta = spec.to_vector() + rng.normal(0, 0.4, spec.n_free)
        ev = evaluate(plan, theta, method=method)
        numeric = _finite_difference(plan, theta, method)
        # central differences: error O(h^2) ~ 1e-10 relative, plus rounding ~ 1e-16 |l| / h
        tolerance = 1e-6 * max(1.0, abs(ev.log_likelihood))
        np.testing.assert_allclose(ev.gradient, numeric, atol=tolerance, rtol=1e-5)


def test_gradient_with_defective_generator_uses_fallback_and_is_right(rng):
    model = progressive_equal_rates()
    spec = parameter_spec(model)
    sim = simulate(model, rng, n_cases=80, n_contacts=6, exact_entry=False)
    plan = prepare(model, sim.timelines, spec)
    theta = spec.to_vector()
    q = model.generators(np.zeros((1, 0)))
    assert not decompose(q).safe[0]          # equal rates on a chain: Jordan block, eigen path refused
    ev = evaluate(plan, theta)
    numeric = _finite_difference(plan, theta, "auto")
    np.testing.assert_allclose(ev.gradient, numeric, atol=1e-6 * abs(ev.log_likelihood), rtol=1e-5)


def test_adjoint_frechet_derivative_against_scipy(rng):
    # <W, L(A, E)> = <L(A^T, W), E>; L from scipy.linalg.expm_frechet (Al-Mohy & Higham 2009)
    q = three_stage_model().generators(np.array([[0.0], [1.0]]))
    gaps = np.array([3.0, 40.0, 400.0, 40.0])
    gens = np.array([0, 0, 1, 1])
    weights = rng.normal(size=(4, 3, 3))
    for method in ("auto", "expm"):
        cache = decompose(q, method)
        p = pair_transition_matrices(cache, gens, gaps)
        grad = adjoint_derivative(cache, gens, gaps, weights)
        for i in range(4):
            np.testing.assert_allclose(p[i], scipy.linalg.expm(q[gens[i]] * gaps[i]), atol=1e-12)
            direction = rng.normal(size=(3, 3))
            _, frechet = scipy.linalg.expm_frechet(q[gens[i]] * gaps[i], direction * gaps[i])
            assert np.sum(weights[i] * frechet) == pytest.approx(np.sum(grad[i] * direction), rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("n_cases", [1, 200])
def test_log_likelihood_equals_engine_forward(rng, n_cases):
    # cross-check with the engine's own forward pass (hmm.inference.forward: the same recursion core,
    # separate step-matrix and evidence code); with exact entry see
    # test_smoothed_probabilities_equal_the_engine_smoother
    model = three_stage_model(exact_entry=False)
    sim = simulate(model, rng, n_cases=n_cases, exact_entry=False)
    spec = parameter_spec(model)
    theta = spec.to_vector() + rng.normal(0, 0.3, spec.n_free)
    value, _ = log_likelihood_and_gradient(model, sim.timelines, theta, spec)
    assert value == pytest.approx(forward(spec.to_model(theta), sim.timelines).log_likelihood.sum(), rel=1e-10)


def test_exact_entry_term_by_hand():
    # One case: Well at day 0 (known), exact entry into Gone at day 25.
    # Term = sum_{r != Gone} P(Well -> r, 25) q_{r, Gone}  (Jackson 2011, msm "exact death times").
    model = three_stage_model(with_covariate=False)
    timelines = Timelines(offsets=np.array([0, 2]), times=np.array([0.0, 25.0]),
                          observations=np.full((2, 2), -1, dtype=np.int16),
                          allowed_stages=np.array([[True, False, False], [False, False, True]]),
                          covariates=np.zeros((2, 0)))
    q = model.generator()
    p = scipy.linalg.expm(q * 25.0)
    by_hand = np.log(model.initial[0]) + np.log(p[0, 0] * q[0, 2] + p[0, 1] * q[1, 2])
    value, _ = log_likelihood_and_gradient(model, timelines)
    assert value == pytest.approx(by_hand, rel=1e-12)
    # without exact entry the same record means "in Gone by day 25"
    plain = dataclasses.replace(model, exact_entry_stages=())
    value_plain, _ = log_likelihood_and_gradient(plain, timelines)
    assert value_plain == pytest.approx(np.log(model.initial[0] * p[0, 2]), rel=1e-12)


def test_equal_gaps_match_hmmlearn_score(rng):
    # hmmlearn CategoricalHMM (discrete time) with transmat = expm(Q * gap) and joint symbols of the
    # two channels must give the same log-likelihood (hmmlearn docs: score = log P(X | model)).
    hmmlearn = pytest.importorskip("hmmlearn.hmm")
    from hmm.simulate import regular_contacts, simulate_caseload

    model = three_stage_model(with_covariate=False, exact_entry=False)
    sim = simulate_caseload(model, regular_contacts(150, 9, 30.0), np.zeros((150, 0)), rng)
    spec = parameter_spec(model)
    theta = spec.to_vector() + rng.normal(0, 0.3, spec.n_free)
    fitted = spec.to_model(theta)
    value, _ = log_likelihood_and_gradient(fitted, sim.timelines)
    b1, b2 = fitted.emission_matrices()
    joint = np.einsum("sa,sb->sab", b1, b2).reshape(3, -1)
    symbols = sim.timelines.observations[:, 0] * b2.shape[1] + sim.timelines.observations[:, 1]
    reference = hmmlearn.CategoricalHMM(n_components=3, init_params="", params="", n_features=joint.shape[1])
    reference.startprob_ = fitted.initial
    reference.transmat_ = scipy.linalg.expm(fitted.generator() * 30.0)
    reference.emissionprob_ = joint
    expected = reference.score(symbols.reshape(-1, 1).astype(int), lengths=sim.timelines.n_contacts_per_case)
    assert value == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("threads", [2, 3])
def test_case_blocks_in_threads_give_the_one_block_result(rng, monkeypatch, threads):
    # the same sums, added block by block: equal up to rounding; small chunks walk the chunk boundaries
    import hmm.fitting.likelihood as likelihood
    import hmm.forward_backward as core

    monkeypatch.setattr(core, "CHUNK_ROWS", 5)
    monkeypatch.setattr(likelihood, "_PAIR_CHUNK_STEPS", 7)   # pairs split across chunks of steps
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=60, n_contacts=7)
    spec = parameter_spec(model)
    theta = spec.to_vector() + rng.normal(0, 0.3, spec.n_free)
    one = evaluate(prepare(model, sim.timelines, spec, threads=1), theta, smoothed=True)
    plan = prepare(model, sim.timelines, spec, threads=threads)
    assert len(plan.blocks) == threads
    many = evaluate(plan, theta, smoothed=True)
    assert many.log_likelihood == pytest.approx(one.log_likelihood, rel=1e-13)
    np.testing.assert_allclose(many.gradient, one.gradient, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(many.case_log_likelihood, one.case_log_likelihood, rtol=1e-12)
    np.testing.assert_allclose(many.smoothed, one.smoothed, rtol=1e-12, atol=1e-15)
    # a second evaluation reuses the blocks' buffers and gives the same numbers
    again = evaluate(plan, theta)
    assert again.log_likelihood == many.log_likelihood
    np.testing.assert_array_equal(again.gradient, many.gradient)
    numeric = _finite_difference(plan, theta, "auto")
    np.testing.assert_allclose(many.gradient, numeric, atol=1e-6 * abs(many.log_likelihood), rtol=1e-5)


def test_smoothed_probabilities_equal_the_engine_smoother(rng):
    # the fitting likelihood's smoothed probabilities against hmm.inference.smoothed_probabilities
    # (the same forward-backward core, separate step-matrix and evidence code), with exact entry
    from hmm.inference import smoothed_probabilities

    model = three_stage_model()
    sim = simulate(model, rng, n_cases=80, n_contacts=6)
    spec = parameter_spec(model)
    theta = spec.to_vector() + rng.normal(0, 0.3, spec.n_free)
    ev = evaluate(prepare(model, sim.timelines, spec, threads=2), theta, smoothed=True)
    fitted = spec.to_model(theta)
    total = ev.smoothed.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(ev.smoothed / total, smoothed_probabilities(fitted, sim.timelines), atol=1e-9)
    assert ev.log_likelihood == pytest.approx(forward(fitted, sim.timelines).log_likelihood.sum(), rel=1e-10)


@pytest.mark.parametrize("threads", [1, 2])
def test_caseload_of_single_contacts_has_no_steps_and_a_gradient(threads):
    # no case has a second contact: the log-likelihood is sum log(initial . e) and only the initial and
    # observation probabilities have a gradient (by hand: no step matrix enters)
    model = three_stage_model()
    n = 5
    timelines = Timelines(offsets=np.arange(n + 1), times=np.zeros(n), observations=np.zeros((n, 2), np.int16),
                          allowed_stages=np.ones((n, 3), bool), covariates=np.zeros((n, 1)))
    spec = parameter_spec(model)
    ev = evaluate(prepare(model, timelines, spec, threads=threads), spec.to_vector())
    e = model.channels[0].probabilities[:, 0] * model.channels[1].probabilities[:, 0]
    assert ev.log_likelihood == pytest.approx(n * np.log(model.initial @ e), rel=1e-12)
    rates = [i for i, kind in enumerate(spec.kinds) if kind in ("rate", "log_hazard_ratio")]
    assert rates
    np.testing.assert_array_equal(ev.gradient[rates], 0.0)
