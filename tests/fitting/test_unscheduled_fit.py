"""Fitting the timing of unscheduled contacts: analytic gradient, recovery of known rates, nested comparison."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from fitting_helpers import three_stage_model

from hmm.fitting import fit_model, likelihood_ratio_test, parameter_spec
from hmm.fitting.likelihood import evaluate, prepare
from hmm.model import UnscheduledContacts
from hmm.simulate import simulate_caseload

TRUE_CONTACT_RATES = np.array([0.004, 0.02, 0.0])   # per day: about 1.5 and 7 a year; none once gone


def timing_model(effects=None, same=False, rates=TRUE_CONTACT_RATES):
    block = UnscheduledContacts(np.array(rates, dtype=float), dict(effects or {}), same_in_every_stage=same)
    return replace(three_stage_model(), unscheduled_contacts=block)


def scheduled_reviews(rng, n_cases, span=720.0):
    """Reviews every 8-16 weeks from day 0 until ``span`` (an invented schedule)."""
    out = []
    for _ in range(n_cases):
        gaps = rng.integers(56, 113, size=20).astype(float)
        times = np.concatenate([[0.0], np.cumsum(gaps)])
        out.append(times[times <= span])
    return out


def simulate_timing(model, rng, n_cases=300, end=None):
    covariates = rng.integers(0, 2, size=(n_cases, model.n_covariates)).astype(float)
    return simulate_caseload(model, scheduled_reviews(rng, n_cases), covariates, rng, missing_probability=0.1,
                             end_times=None if end is None else np.full(n_cases, end))


@pytest.mark.parametrize("method", ["auto", "expm"])
@pytest.mark.parametrize("same", [False, True])
def test_gradient_matches_finite_differences(rng, method, same):
    model = timing_model(effects={"alone": 0.3}, same=same,
                         rates=[0.01, 0.01, 0.0] if same else TRUE_CONTACT_RATES)
    timelines = simulate_timing(model, rng, n_cases=40 if method == "auto" else 12).timelines
    assert timelines.unscheduled.any() and not timelines.unscheduled.all()
    spec = parameter_spec(model)
    theta = spec.to_vector(model) + rng.normal(0.0, 0.1, spec.n_free)
    plan = prepare(model, timelines, spec)
    gradient = evaluate(plan, theta, method=method).gradient
    step = 1e-6
    numeric = np.array([(evaluate(plan, theta + step * e, False, method).log_likelihood
                         - evaluate(plan, theta - step * e, False, method).log_likelihood) / (2 * step)
                        for e in np.eye(spec.n_free)])
    # central differences, error O(step^2) plus rounding (common practice, no source)
    np.testing.assert_allclose(gradient, numeric, rtol=1e-5, atol=1e-4)
    timing = [i for i, kind in enumerate(spec.kinds) if kind.startswith("unscheduled")]
    assert len(timing) == (1 if same else 2) + 1
    assert np.all(np.abs(gradient[timing]) > 1e-3)  # the timing parameters are really in the likelihood


def test_fit_recovers_known_rates_within_four_standard_errors(rng):
    """Unscheduled contacts keep coming after the last review, up to day 800 (the data extract): the fit
    counts that quiet time through ``observed_until``."""
    truth = timing_model()
    sim = simulate_timing(truth, rng, n_cases=400, end=800.0)
    start = timing_model(rates=[0.01, 0.01, 0.0])
    start = start.with_rates({("Well", "Unwell"): 0.02, ("Unwell", "Well"): 0.01, ("Unwell", "Gone"): 0.002})
    result = fit_model(start, sim.timelines, starts=1, observed_until=800.0)
    assert result.n_contacts == sim.timelines.n_contacts  # the quiet tails are not contacts
    assert result.converged
    estimates = {p.name: p for p in result.parameters}
    checked = 0
    for t in truth.transitions:
        p = estimates[f"rate {truth.stages[t.source]} -> {truth.stages[t.target]} (per day)"]
        assert abs(p.estimate - t.rate) < 4 * p.standard_error, p
        checked += 1
    for stage, rate in zip(truth.stages, TRUE_CONTACT_RATES):
        p = estimates[f"unscheduled contacts in {stage} (per day)"]
        if rate == 0:
            assert p.fixed and p.estimate == 0.0  # a structural zero stays zero
            continue
        assert abs(p.estimate - rate) < 4 * p.standard_error, p
        checked += 1
    assert checked == 5
    table = result.format_table()
    assert "Unscheduled contacts per year in each stage" in table
    per_year = {p.name: p for p in result.unscheduled_contacts_per_year()}
    unwell = per_year["unscheduled contacts in Unwell (per year)"]
    assert unwell.estimate == pytest.approx(estimates["unscheduled contacts in Unwell (per day)"].estimate * 365.25)


def test_same_rate_in_every_stage_is_the_timing_blind_fit_plus_a_poisson_term(rng):
    """The nested restriction lambda_s = lambda: its timing factor does not depend on the stage, so the
    transition and observation estimates are the timing-blind ones and the log-likelihood adds the Poisson
    maximum n log(n / T) - n (n unscheduled contacts in exposure T; the MLE of a Poisson rate, common
    practice, no source)."""
    sim = simulate_timing(timing_model(rates=[0.01, 0.01, 0.01]), rng, n_cases=200)
    t = sim.timelines
    blind = fit_model(three_stage_model(), t, starts=1)
    same = fit_model(timing_model(same=True, rates=[0.01, 0.01, 0.01]), t, starts=1)
    n = int(t.unscheduled.sum() - t.unscheduled[t.first_index].sum())
    exposure = float((t.times[t.last_index] - t.times[t.first_index]).sum())
    poisson = n * np.log(n / exposure) - n
    assert same.log_likelihood - blind.log_likelihood == pytest.approx(poisson, abs=0.05)
    blind_rates = {p.name: p.estimate for p in blind.parameters if p.kind == "rate"}
    for p in same.parameters:
        if p.kind == "rate":
            assert p.estimate == pytest.approx(blind_rates[p.name], rel=2e-3)
    # the stage-dependent model nests the restricted one: a likelihood-ratio test on the same data
    general = fit_model(timing_model(rates=[0.01, 0.01, 0.01]), t, starts=1)
    test = likelihood_ratio_test(same, general)
    assert test.df == 2
    assert general.log_likelihood >= same.log_likelihood - 1e-6


def test_timing_comparison_says_what_is_compared():
    from hmm.fitting.compare import SHARED_CONTACT_RATE, contact_timing_of, timing_comparison

    assert contact_timing_of(three_stage_model()) == "none"
    assert contact_timing_of(timing_model(same=True, rates=[0.01, 0.01, 0.0])) == "same_in_every_stage"
    assert contact_timing_of(timing_model()) == "stage_dependent"
    general = set(parameter_spec(timing_model()).names)
    restricted = set(parameter_spec(timing_model(same=True, rates=[0.01, 0.01, 0.0])).names)
    assert SHARED_CONTACT_RATE in restricted
    blind = set(parameter_spec(three_stage_model()).names)
    mixed = timing_comparison("none", "stage_dependent", blind, general)
    assert not mixed.comparable and "not comparable" in mixed.explanation and "same_in_every_stage" in mixed.explanation
    nested = timing_comparison("stage_dependent", "same_in_every_stage", general, restricted)
    assert nested.comparable and nested.nested and "one rate in every stage" in nested.explanation
    plain = timing_comparison("none", "none", blind, blind)
    assert plain.comparable and not plain.nested and plain.explanation == ""
