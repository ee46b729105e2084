"""The simulator against computed probabilities (Monte Carlo, binomial tolerances)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from engine_helpers import model_from_matrices
from hmm import MISSING, forecast, regular_contacts, simulate_caseload, simulate_path

Q3 = np.array([[-0.06, 0.04, 0.02], [0.03, -0.05, 0.02], [0.0, 0.0, 0.0]])
EMISSION = np.array([[0.7, 0.2, 0.1], [0.2, 0.6, 0.2], [0.1, 0.1, 0.8]])


def _within_binomial(observed_count, n, probability, z=4.0):
    # Binomial standard error sqrt(p(1-p)/n); 4 SE (common practice, no source).
    se = np.sqrt(np.maximum(probability * (1 - probability), 1e-12) / n)
    return np.abs(observed_count / n - probability) <= z * se + 1e-12


def _model(**kw):
    effects = {(0, 1): {"x": 0.8}}
    return model_from_matrices(Q3, [0.7, 0.3, 0.0], [EMISSION], effects=effects, covariates=("x",), **kw)


def test_occupancy_at_contacts_matches_transition_matrix(rng):
    model = _model()
    n = 20_000
    x = (np.arange(n) % 2).astype(float)[:, None]
    sim = simulate_caseload(model, regular_contacts(n, 3, 15.0), x, rng, exact_entry=False)
    tl = sim.timelines
    assert tl.n_contacts == 3 * n
    for group in (0.0, 1.0):
        p15 = model.initial @ scipy.linalg.expm(model.generator([group]) * 15.0)  # scipy reference
        p30 = p15 @ scipy.linalg.expm(model.generator([group]) * 15.0)
        cases = np.flatnonzero(x[:, 0] == group)
        for position, expected in ((0, model.initial), (1, p15), (2, p30)):
            stages = sim.true_stages[tl.offsets[cases] + position]
            counts = np.bincount(stages, minlength=3)
            assert np.all(_within_binomial(counts, cases.size, expected)), (position, counts / cases.size, expected)


def test_exact_entry_contacts_and_reach_frequency(rng):
    model = _model(exact_entry=(2,))
    n, horizon = 20_000, 40.0
    sim = simulate_caseload(model, regular_contacts(n, 2, horizon), np.zeros((n, 1)), rng)
    tl = sim.timelines
    entered = sim.exact_entry_contact
    # Exact-entry contacts: one allowed stage, all evidence missing, strictly between scheduled contacts.
    assert np.all(tl.allowed_stages[entered].sum(axis=1) == 1) and np.all(tl.allowed_stages[entered, 2])
    assert np.all(tl.observations[entered] == MISSING)
    assert np.all((tl.times[entered] > 0) & (tl.times[entered] < horizon))
    assert np.all(np.isin(np.flatnonzero(entered), tl.last_index))
    assert np.all(sim.true_stages[entered] == 2)
    # Cases that entered stage 2 do not get the scheduled contact at day 40.
    had_entry = np.zeros(n, bool)
    had_entry[sim.case_of_contact[entered]] = True
    assert np.all(tl.n_contacts_per_case[had_entry] == 2)
    assert np.all(tl.times[tl.last_index[~had_entry]] == horizon)
    # Frequency of reaching the absorbing stage within the horizon vs forecast().reach.
    reach = forecast(model, model.initial[None], np.zeros((1, 1)), horizon).reach[0, 2]
    assert _within_binomial(had_entry.sum(), n, reach)


def test_reach_of_transient_stage_with_single_paths(rng):
    # Reach of a transient stage (not absorbing) within H from Gillespie paths vs forecast().reach.
    q = np.array([[-0.05, 0.03, 0.02], [0.1, -0.12, 0.02], [0.01, 0.01, -0.02]])
    model = model_from_matrices(q, [1.0, 0.0, 0.0])
    horizon, n = 12.0, 4000
    hits = np.zeros(3, int)
    occupancy = np.zeros(3, int)
    for _ in range(n):
        _, stages = simulate_path(q, 0, horizon, rng)
        hits[np.unique(stages)] += 1
        occupancy[stages[-1]] += 1
    result = forecast(model, np.array([[1.0, 0.0, 0.0]]), np.zeros((1, 0)), horizon)
    assert np.all(_within_binomial(hits, n, result.reach[0])), (hits / n, result.reach[0])
    assert np.all(_within_binomial(occupancy, n, result.at_horizon[0])), (occupancy / n, result.at_horizon[0])


def test_observations_follow_emission_rows_and_missing_rate(rng):
    model = _model()
    n = 30_000
    sim = simulate_caseload(model, regular_contacts(n, 1, 1.0), np.zeros((n, 1)), rng, missing_probability=0.25)
    codes = sim.timelines.observations[:, 0]
    assert _within_binomial((codes == MISSING).sum(), n, 0.25)
    for stage in (0, 1):
        seen = codes[(sim.true_stages == stage) & (codes != MISSING)]
        counts = np.bincount(seen, minlength=3)
        assert np.all(_within_binomial(counts, seen.size, EMISSION[stage]))


def test_simulation_is_reproducible_and_checks_input():
    model = _model()
    a = simulate_caseload(model, regular_contacts(50, 4, 10.0), np.ones((50, 1)), np.random.default_rng(5))
    b = simulate_caseload(model, regular_contacts(50, 4, 10.0), np.ones((50, 1)), np.random.default_rng(5))
    np.testing.assert_array_equal(a.timelines.observations, b.timelines.observations)
    np.testing.assert_array_equal(a.true_stages, b.true_stages)
    with pytest.raises(ValueError):
        simulate_caseload(model, [np.array([])], np.zeros((1, 1)), np.random.default_rng(0))


def test_step_uses_covariates_of_earlier_contact(rng):
    # Per-contact covariates: x = 1 at the first contact, 0 at the second; the chain between them
    # must run with Q(x = 1).
    model = _model()
    n = 20_000
    covariates = [np.array([[1.0], [0.0]])] * n
    sim = simulate_caseload(model, regular_contacts(n, 2, 20.0), covariates, rng, exact_entry=False)
    expected = model.initial @ scipy.linalg.expm(model.generator([1.0]) * 20.0)  # scipy reference
    counts = np.bincount(sim.true_stages[sim.timelines.last_index], minlength=3)
    assert np.all(_within_binomial(counts, n, expected)), (counts / n, expected)
    np.testing.assert_array_equal(sim.timelines.covariates[:2, 0], [1.0, 0.0])


def test_demo_model_pipeline(demo_model, rng):
    from hmm import forward, most_likely_path, smoothed_probabilities

    n = 3000
    x = np.column_stack([rng.integers(0, 2, n), rng.integers(0, 2, n)]).astype(float)
    times = [np.cumsum(np.r_[0.0, rng.integers(20, 90, 11)]) for _ in range(n)]
    sim = simulate_caseload(demo_model, times, x, rng, missing_probability=0.1)
    tl = sim.timelines
    assert sim.exact_entry_contact.any()
    result = forward(demo_model, tl)
    assert np.all(np.isfinite(result.log_likelihood))
    smoothed = smoothed_probabilities(demo_model, tl, forward_result=result)
    np.testing.assert_allclose(smoothed.sum(axis=1), 1.0, atol=1e-10)
    path = most_likely_path(demo_model, tl)
    entry = demo_model.stage_index("Moved to residential care")
    assert np.all(path[sim.exact_entry_contact] == entry)
    np.testing.assert_allclose(smoothed[sim.exact_entry_contact, entry], 1.0)
