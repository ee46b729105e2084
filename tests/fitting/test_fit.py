"""Maximum-likelihood fit: recovery, MLE property, fixed values, cancellation, LR test."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.stats

from fitting_helpers import simulate, three_stage_model
from hmm.fitting import fit_model, likelihood_ratio_test, log_likelihood_and_gradient, parameter_spec
from hmm.model import Transition


@pytest.fixture(scope="module")
def fitted_caseload():
    rng = np.random.default_rng(20261202)
    truth = three_stage_model()
    sim = simulate(truth, rng, n_cases=500, n_contacts=10)
    # start away from the truth: every rate doubled, effect 0, blurred observation rows
    spec = parameter_spec(truth)
    start = spec.to_model(spec.to_vector() + np.where(np.array(spec.kinds) == "rate", np.log(2.0), 0.3))
    result = fit_model(start, sim.timelines, starts=2, rng=np.random.default_rng(5), intervals="wald")
    return truth, sim, result


def test_parameter_recovery_within_four_standard_errors(fitted_caseload):
    truth, sim, result = fitted_caseload
    assert result.converged
    spec = parameter_spec(truth)
    true_theta = spec.to_vector(truth)
    se = np.sqrt(np.diag(result.covariance))
    assert np.all(np.isfinite(se)) and np.all(se > 0)
    # asymptotic normality of the MLE: |est - true| / SE ~ N(0, 1); 4 SE leaves ~6e-5 per parameter
    # for chance failure (common practice, no source)
    z = np.abs(result.free_vector - true_theta) / se
    assert np.all(z < 4.0), dict(zip(spec.names, np.round(z, 2)))
    # the natural-scale 95% intervals cover the true rates for most parameters: each covers with
    # probability ~0.95, so missing two of three has probability ~3 * 0.05**2 (common practice, no source)
    rates = {p.name: p for p in result.parameters if p.kind == "rate"}
    truth_rates = {f"rate {truth.stages[t.source]} -> {truth.stages[t.target]} (per day)": t.rate for t in truth.transitions}
    assert set(rates) == set(truth_rates)
    covered = [rates[name].lower <= truth_rates[name] <= rates[name].upper for name in rates]
    assert sum(covered) >= len(covered) - 1, {name: (rates[name].lower, truth_rates[name], rates[name].upper)
                                               for name in rates}


def test_fitted_log_likelihood_is_at_least_the_truth(fitted_caseload):
    truth, sim, result = fitted_caseload
    at_truth, _ = log_likelihood_and_gradient(truth, sim.timelines)
    # the MLE maximises the likelihood, so it cannot be below the value at the true parameters
    assert result.log_likelihood >= at_truth - 1e-6
    assert result.aic == pytest.approx(-2 * result.log_likelihood + 2 * result.n_parameters)
    assert result.bic == pytest.approx(-2 * result.log_likelihood + result.n_parameters * np.log(500))
    assert result.history and result.history[-1].log_likelihood <= result.log_likelihood + 1e-6
    assert len(result.start_log_likelihoods) == 2


def test_summary_is_json_and_table_readable(fitted_caseload):
    import json
    _, _, result = fitted_caseload
    summary = json.loads(json.dumps(result.to_summary().to_dict(), allow_nan=False))
    assert summary["n_parameters"] == result.n_parameters
    table = result.format_table()
    for text in ("Mean time in stage", "Hazard ratios", "Observation probabilities", "AIC", "BIC", "converged"):
        assert text in table
    sojourn = {p.name: p for p in result.mean_time_in_stage}
    well = sojourn["mean time in Well (days)"]
    rate = next(p for p in result.parameters if p.name.startswith("rate Well -> Unwell"))
    # mean sojourn = -1/q_rr; only one way out of Well, so 1/rate (Norris 1997, Markov Chains, 2.6)
    assert well.estimate == pytest.approx(1.0 / rate.estimate)
    assert well.lower == pytest.approx(1.0 / rate.upper) and well.upper == pytest.approx(1.0 / rate.lower)
    hr = result.hazard_ratios[0]
    assert hr.lower < hr.estimate < hr.upper


def test_fixed_parameters_stay_exactly_fixed(rng):
    model = three_stage_model()
    t = model.transitions
    model = dataclasses.replace(model, transitions=(dataclasses.replace(t[0], fixed_effects=frozenset({"alone"})),
                                                    dataclasses.replace(t[1], fixed_rate=True), t[2]),
                                initial_fixed=True)
    sim = simulate(three_stage_model(), rng, n_cases=150, n_contacts=6)
    result = fit_model(model, sim.timelines, starts=1, intervals="wald")
    fitted = result.model
    assert fitted.transitions[1].rate == model.transitions[1].rate
    assert fitted.transitions[0].effects["alone"] == model.transitions[0].effects["alone"]
    np.testing.assert_array_equal(fitted.initial, model.initial)
    np.testing.assert_array_equal(fitted.channels[0].probabilities[2], model.channels[0].probabilities[2])
    assert fitted.transitions[0].rate != model.transitions[0].rate
    fixed = {p.name: p.fixed for p in result.parameters}
    assert fixed["rate Unwell -> Well (per day)"] and not fixed["rate Well -> Unwell (per day)"]
    assert result.n_parameters == parameter_spec(model).n_free == 3 - 1 + 0 + 6


def test_cancelled_fit_raises_and_returns_nothing(rng):
    from caseview.errors import Cancelled

    sim = simulate(three_stage_model(), rng, n_cases=50, n_contacts=5)
    calls = []

    def callback(fraction):
        calls.append(fraction)
        if len(calls) >= 3:
            raise Cancelled()

    with pytest.raises(Cancelled):
        fit_model(three_stage_model(), sim.timelines, starts=2, callback=callback, intervals="wald")
    assert len(calls) == 3 and all(0 <= f <= 1 for f in calls)


def test_progress_is_monotone_and_ends_at_one(rng):
    sim = simulate(three_stage_model(), rng, n_cases=60, n_contacts=5)
    seen = []
    fit_model(three_stage_model(), sim.timelines, starts=2, callback=seen.append, intervals="wald")
    assert seen == sorted(seen) and seen[-1] == 1.0


def test_same_seed_same_fit(rng):
    sim = simulate(three_stage_model(), rng, n_cases=80, n_contacts=5)
    a = fit_model(three_stage_model(), sim.timelines, starts=2, rng=np.random.default_rng(3), intervals="wald")
    b = fit_model(three_stage_model(), sim.timelines, starts=2, rng=np.random.default_rng(3), intervals="wald")
    assert a.log_likelihood == b.log_likelihood
    np.testing.assert_array_equal(a.free_vector, b.free_vector)


def test_likelihood_ratio_test_by_hand(fitted_caseload):
    truth, sim, general = fitted_caseload
    t = truth.transitions
    restricted_model = dataclasses.replace(truth, transitions=(Transition(0, 1, t[0].rate), t[1], t[2]))
    restricted = fit_model(restricted_model, sim.timelines, starts=1, intervals="wald")
    test = likelihood_ratio_test(restricted, general)
    statistic = 2 * (general.log_likelihood - restricted.log_likelihood)
    assert test.df == 1
    assert test.statistic == pytest.approx(statistic)
    # chi-squared upper tail, 1 df: P(X > x) = erfc(sqrt(x / 2)) (Abramowitz & Stegun 26.4.4 with 6.5.x)
    from math import erfc, sqrt
    assert test.p_value == pytest.approx(erfc(sqrt(statistic / 2)), rel=1e-9, abs=1e-300)
    assert test.p_value == pytest.approx(scipy.stats.chi2.sf(statistic, 1))
    with pytest.raises(ValueError):
        likelihood_ratio_test(general, restricted)


@pytest.mark.parametrize("kind,lower,upper,informative", [
    ("hazard_ratio", 0.0, 2.5e53, False),        # an effect the data cannot pin down
    ("hazard_ratio", 0.85, 2.0, True),
    ("rate", 1e-7, 0.01, False),
    ("mean_time_in_stage", 69.2, 184.0, True),
    ("log_hazard_ratio", -40.0, 30.0, False),
    ("log_hazard_ratio", -0.2, 0.7, True),
    ("observation", 0.001, 0.35, True),           # probabilities are bounded: always shown
    ("rate", None, None, False),
])
def test_uninformative_intervals_are_named_not_printed(kind, lower, upper, informative):
    from hmm.fitting.uncertainty import ParameterEstimate

    estimate = ParameterEstimate("x", kind, 0.5, 1.0, lower, upper, False)
    assert estimate.interval_is_informative is informative
    assert estimate.to_dict()["informative"] is informative


def test_fit_without_standard_errors_gives_the_same_estimate_and_no_intervals(rng):
    model = three_stage_model()
    timelines = simulate(model, rng, n_cases=150).timelines
    with_se = fit_model(model, timelines, starts=1, intervals="wald")
    without = fit_model(model, timelines, starts=1, standard_errors=False)
    np.testing.assert_array_equal(with_se.free_vector, without.free_vector)   # same optimiser path
    assert without.n_likelihood_evaluations < with_se.n_likelihood_evaluations
    assert all(p.lower is None for p in without.parameters if not p.fixed)
    assert any(p.lower is not None for p in with_se.parameters if not p.fixed)


def test_one_sided_information_matches_central_differences_with_half_the_gradients(rng):
    # Hessian from differences of the analytic gradient (Nocedal & Wright 2006, section 8.1): one-sided with a
    # small step against central with the usual one; the fit uses the one-sided form (one gradient per parameter)
    from hmm.fitting.likelihood import evaluate, prepare
    from hmm.fitting.parameters import parameter_spec
    from hmm.fitting.uncertainty import covariance_from_information, observed_information

    model = three_stage_model()
    timelines = simulate(model, rng, n_cases=300).timelines
    spec = parameter_spec(model)
    plan = prepare(model, timelines, spec)
    theta = spec.to_vector() + rng.normal(0, 0.1, spec.n_free)
    calls = []

    def gradient(x):
        calls.append(1)
        return evaluate(plan, x).gradient

    central = observed_information(gradient, theta)
    assert len(calls) == 2 * spec.n_free
    calls.clear()
    one_sided = observed_information(gradient, theta, differences="one-sided")
    assert len(calls) == spec.n_free + 1
    np.testing.assert_allclose(one_sided, central, rtol=1e-5, atol=1e-5 * np.abs(central).max())
    errors = [np.sqrt(np.diag(covariance_from_information(m, spec.names)[0])) for m in (central, one_sided)]
    np.testing.assert_allclose(errors[1], errors[0], rtol=1e-5)
    with pytest.raises(ValueError, match="differences"):
        observed_information(gradient, theta, differences="backward")


def test_fit_spends_one_gradient_per_free_parameter_on_the_information(rng):
    model = three_stage_model()
    timelines = simulate(model, rng, n_cases=200).timelines
    with_errors = fit_model(model, timelines, starts=1, intervals="wald")
    without = fit_model(model, timelines, starts=1, standard_errors=False)
    # the information: one gradient per free parameter, and g(theta) unless the optimiser's last one was there
    extra = with_errors.n_likelihood_evaluations - without.n_likelihood_evaluations
    assert with_errors.n_parameters <= extra <= with_errors.n_parameters + 1
