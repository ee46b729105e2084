"""Penalised fit for small caseloads (hmm/fitting/priors.py) and the warnings for what data cannot identify."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.stats

from fitting_helpers import irregular_times, simulate, three_stage_model
from hmm.fitting import Prior, fit_model, parameter_spec
from hmm.fitting.uncertainty import covariance_from_information
from hmm.simulate import simulate_caseload


def _reference_log_prior(prior, spec, theta):
    """The prior's log density from scipy.stats, on the same parameters (up to an additive constant)."""
    kinds = np.array(spec.kinds)
    value = 0.0
    # normal priors on log rates and log hazard ratios (scipy.stats.norm.logpdf)
    value += scipy.stats.norm.logpdf(theta[kinds == "rate"], prior.log_rate_mean, prior.log_rate_sd).sum()
    value += scipy.stats.norm.logpdf(theta[kinds == "log_hazard_ratio"], prior.effect_mean, prior.effect_sd).sum()
    # Dirichlet on each free probability row, on the probability scale (scipy.stats.dirichlet.logpdf)
    arrays = spec.arrays(theta)
    rows = [(arrays.emissions[c][r], row) for c, channel_rows in enumerate(spec.emission_rows)
            for r, row in enumerate(channel_rows) if row is not None]
    if spec.initial_row is not None:
        rows.append((arrays.initial, spec.initial_row))
    for p, row in rows:
        x = p[row.support]
        value += scipy.stats.dirichlet.logpdf(x / x.sum(), np.full(x.size, prior.concentration))
    return value


@pytest.mark.parametrize("prior", [Prior(), Prior(log_rate_mean=-3.0, log_rate_sd=0.7, effect_sd=0.5,
                                                  concentration=2.5)])
def test_log_prior_matches_scipy_up_to_a_constant(rng, prior):
    spec = parameter_spec(three_stage_model())
    points = [spec.to_vector() + rng.normal(0, 0.8, spec.n_free) for _ in range(4)]
    ours = np.array([prior.log_density_and_gradient(t, spec)[0] for t in points])
    reference = np.array([_reference_log_prior(prior, spec, t) for t in points])
    # differences between points cancel the normalising constants (scipy.stats.norm / dirichlet logpdf)
    np.testing.assert_allclose(ours - ours[0], reference - reference[0], rtol=1e-10, atol=1e-10)


def test_log_prior_gradient_matches_finite_differences(rng):
    prior = Prior(concentration=2.0)
    spec = parameter_spec(three_stage_model())
    for _ in range(3):
        theta = spec.to_vector() + rng.normal(0, 0.8, spec.n_free)
        _, grad = prior.log_density_and_gradient(theta, spec)
        numeric = np.zeros_like(theta)
        step = 1e-6
        for i in range(theta.size):
            up, down = theta.copy(), theta.copy()
            up[i] += step
            down[i] -= step
            numeric[i] = (prior.log_density_and_gradient(up, spec)[0]
                          - prior.log_density_and_gradient(down, spec)[0]) / (2 * step)
        # central differences: truncation O(h^2) ~ 1e-12, rounding ~ 1e-16 * |value| / h ~ 1e-9
        np.testing.assert_allclose(grad, numeric, rtol=1e-6, atol=1e-7)


def test_flat_prior_adds_nothing():
    spec = parameter_spec(three_stage_model())
    theta = spec.to_vector()
    flat = Prior(log_rate_sd=np.inf, effect_sd=np.inf, concentration=1.0)
    value, grad = flat.log_density_and_gradient(theta, spec)
    assert value == 0.0 and not grad.any()


def test_penalised_log_likelihood_is_log_likelihood_plus_log_prior(rng):
    sim = simulate(three_stage_model(), rng, n_cases=40, n_contacts=5)
    result = fit_model(three_stage_model(), sim.timelines, starts=1, penalised=True, intervals="wald")
    prior_value, _ = Prior().log_density_and_gradient(result.free_vector, parameter_spec(three_stage_model()))
    assert result.penalised
    assert result.penalised_log_likelihood == pytest.approx(result.log_likelihood + prior_value, rel=1e-9)


def _never_recorded(timelines, channel, category, instead):
    """The same timelines with one category of a channel never recorded (recoded as another)."""
    observations = timelines.observations.copy()
    observations[observations[:, channel] == category, channel] = instead
    return dataclasses.replace(timelines, observations=observations)


def test_tiny_caseload_penalised_fit_stays_finite_where_the_plain_fit_hits_a_boundary(rng):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=30, n_contacts=4)
    # "many" is never recorded on the report channel: its maximum-likelihood probability is 0 in every
    # stage, a boundary of the parameter space (the logit runs to its bound)
    timelines = _never_recorded(sim.timelines, channel=1, category=2, instead=1)
    plain = fit_model(model, timelines, starts=1, intervals="wald")
    assert any("channel 'report'" in w and "on the boundary" in w for w in plain.warnings), plain.warnings
    many = [p for p in plain.parameters if p.name.startswith("report: P(many |") and not p.fixed]
    assert max(p.estimate for p in many) < 1e-4

    penalised = fit_model(model, timelines, starts=1, penalised=True, intervals="wald")
    assert penalised.converged
    assert not any("on the boundary" in w for w in penalised.warnings), penalised.warnings
    spec = parameter_spec(model)
    theta = penalised.free_vector
    assert np.all(np.isfinite(theta)) and np.all(theta > spec.lower + 1) and np.all(theta < spec.upper - 1)
    se = np.sqrt(np.diag(penalised.covariance))
    assert np.all(np.isfinite(se)) and np.all(se < 3.0)          # no flat direction left
    # Dirichlet(1.5) adds half a pseudo-count per category, so an unseen category keeps a moderate share
    # (posterior mode (n_k + a - 1) / (n + K (a - 1)); Gelman et al., Bayesian Data Analysis, 3rd ed., 3.4)
    many = [p for p in penalised.parameters if p.name.startswith("report: P(many |") and not p.fixed]
    assert all(1e-3 < p.estimate < 0.2 for p in many)
    rates = [p.estimate for p in penalised.parameters if p.kind == "rate"]
    assert all(1e-5 < r < 1.0 for r in rates)


def test_an_effect_the_data_cannot_see_is_flagged_and_the_prior_settles_it(rng):
    model = three_stage_model()
    n_cases = 60
    # nobody has the covariate: its effect has no information at all (a flat direction)
    sim = simulate_caseload(model, irregular_times(rng, n_cases, 6), np.zeros((n_cases, 1)), rng,
                            missing_probability=0.1)
    plain = fit_model(model, sim.timelines, starts=1, intervals="wald")
    flat = [w for w in plain.warnings if "flat direction in the Hessian" in w]
    assert flat and "effect of alone on Well -> Unwell" in flat[0], plain.warnings
    hazard = plain.hazard_ratios[0]
    assert hazard.lower is None and hazard.standard_error is None      # no interval for an unidentified value

    penalised = fit_model(model, sim.timelines, starts=1, penalised=True, intervals="wald")
    assert not any("flat direction" in w for w in penalised.warnings)
    effect = next(p for p in penalised.parameters if p.kind == "log_hazard_ratio")
    # with no information from the data the posterior is the prior: mode at the prior mean 0 and
    # curvature 1 / sd^2, so SE = prior sd = 2 (normal prior; Gelman et al., BDA 3rd ed., 2.5)
    assert effect.estimate == pytest.approx(0.0, abs=1e-3)
    assert effect.standard_error == pytest.approx(Prior().effect_sd, rel=0.02)


def test_flat_direction_warning_names_the_parameters_involved():
    # information about a + b only: the direction (1, -1) is flat
    information = np.array([[1.0, 1.0, 0.0], [1.0, 1.0, 0.0], [0.0, 0.0, 4.0]])
    covariance, warnings = covariance_from_information(information, ["a", "b", "c"])
    assert len(warnings) == 1 and "involving: a, b" in warnings[0]
    assert np.isnan(covariance[0, 0]) and np.isnan(covariance[1, 1])
    assert covariance[2, 2] == pytest.approx(0.25)                  # inverse of 4
    _, saddle = covariance_from_information(np.diag([2.0, -1.0]), ["a", "b"])
    assert any("not negative definite" in w for w in saddle)


def test_with_much_data_penalised_and_plain_estimates_agree():
    rng = np.random.default_rng(20261203)
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=2000, n_contacts=10)
    plain = fit_model(model, sim.timelines, starts=1, intervals="wald")
    penalised = fit_model(model, sim.timelines, starts=1, penalised=True, intervals="wald")
    assert plain.converged and penalised.converged
    se = np.sqrt(np.diag(plain.covariance))
    shift = np.abs(penalised.free_vector - plain.free_vector) / se
    # The prior moves the mode by about covariance @ gradient of the log prior, which shrinks like 1/n; at
    # 2,000 cases a weakly informative prior should move no estimate by more than a fifth of its SE
    # (common practice, no source: "the prior washes out").
    names = parameter_spec(model).names
    assert np.all(shift < 0.2), dict(zip(names, shift.round(3)))
    predicted = plain.covariance @ Prior().log_density_and_gradient(plain.free_vector, parameter_spec(model))[1]
    np.testing.assert_allclose(penalised.free_vector - plain.free_vector, predicted, atol=0.05 * se.min())


def test_documented_meaning_of_the_default_prior():
    # README and hmm/fitting/priors.py: a typical stay of a year, 95% of the prior between about 7 days and
    # 50 years; hazard ratios between about 1/50 and 50 (normal 97.5% point 1.96, scipy.stats.norm.ppf)
    prior = Prior()
    z = scipy.stats.norm.ppf(0.975)
    stays = 1 / np.exp(prior.log_rate_mean + np.array([z, -z]) * prior.log_rate_sd)
    assert stays[0] == pytest.approx(7.2, abs=0.1) and stays[1] / 365.25 == pytest.approx(50.3, abs=0.2)
    assert np.exp(z * prior.effect_sd) == pytest.approx(50.4, abs=0.1)
    assert 1 / np.exp(prior.log_rate_mean) == pytest.approx(365.0)
    assert prior.concentration == 1.5


def test_a_move_nobody_makes_is_warned_at_zero_and_kept_small_but_positive_by_the_prior(rng):
    truth = three_stage_model()
    t = truth.transitions
    # nobody ever moves Unwell -> Gone, and Gone's entry would be recorded exactly: the likelihood grows
    # as that rate falls to 0, the lower bound
    never = dataclasses.replace(truth, transitions=(t[0], t[1], dataclasses.replace(t[2], rate=1e-12)))
    sim = simulate(never, rng, n_cases=40, n_contacts=5)
    plain = fit_model(truth, sim.timelines, starts=1, intervals="wald")
    assert any(w.startswith("rate Unwell -> Gone is estimated at (nearly) zero") for w in plain.warnings)
    penalised = fit_model(truth, sim.timelines, starts=1, penalised=True, intervals="wald")
    rate = next(p for p in penalised.parameters if p.name.startswith("rate Unwell -> Gone"))
    # no longer on the boundary (the prior may still leave it weakly identified with 40 cases)
    assert not any("Unwell -> Gone is estimated at (nearly) zero" in w for w in penalised.warnings), penalised.warnings
    # the prior's pull (typical stay a year, sd 2 on the log scale) keeps the rate finite and small
    assert 1e-6 < rate.estimate < 1e-2 and rate.lower is not None and rate.lower > 0
