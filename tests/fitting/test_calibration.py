"""Bootstrap calibration of the intervals' width (hmm.fitting.calibration)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.optimize
import scipy.stats

from fitting_helpers import simulate, three_stage_model
from hmm.fitting import fit_model, parameter_spec
from hmm.fitting.calibration import IntervalCalibration, calibrate_intervals
from hmm.fitting.likelihood import evaluate, prepare
from hmm.fitting.summary import FitSummary

CHI2_95 = scipy.stats.chi2.ppf(0.95, 1)   # 3.841 (scipy.stats as the reference)


@pytest.fixture(scope="module")
def caseload():
    model = three_stage_model()
    return model, simulate(model, np.random.default_rng(11), n_cases=300).timelines


@pytest.fixture(scope="module")
def calibrated_wald(caseload):
    model, timelines = caseload
    return fit_model(model, timelines, starts=1, intervals="wald", calibration_draws=6, rng=3)


def _link_width(e):
    if e.kind in ("rate", "mean_time_in_stage"):
        return math.log(e.upper) - math.log(e.lower)
    return scipy.special.logit(e.upper) - scipy.special.logit(e.lower)


def test_the_threshold_is_the_pooled_95th_percentile_never_below_chi_squared_and_reproducible(caseload):
    model, timelines = caseload
    fit = fit_model(model, timelines, starts=1, intervals="wald")
    spec = parameter_spec(model)
    one = calibrate_intervals(fit.model, timelines, spec, fit.free_vector, fit.covariance, 4,
                              np.random.default_rng(5), threads=1)
    two = calibrate_intervals(fit.model, timelines, spec, fit.free_vector, fit.covariance, 4,
                              np.random.default_rng(5), threads=2)
    assert one == two                                  # one seed per draw, taken up front
    assert one.used == 4 and one.pooled > 4 * 10
    assert one.threshold >= CHI2_95
    assert one.multiplier == pytest.approx(math.sqrt(one.threshold / CHI2_95), rel=1e-12)
    assert one.z == pytest.approx(math.sqrt(one.threshold), rel=1e-12)
    with pytest.raises(ValueError, match="at least 1"):
        calibrate_intervals(fit.model, timelines, spec, fit.free_vector, fit.covariance, 0, np.random.default_rng(5))


def test_refits_under_a_well_determined_model_miss_about_one_time_in_twenty(caseload):
    # With 300 cases of a three-stage model the studentised estimates are close to standard normal
    # (Wald 1943; Cox & Hinkley 1974, Theoretical Statistics, section 9.3), so about 5% of |z*| exceed
    # 1.96 and the calibration hardly widens anything. Fixed seed: a deterministic check, with bounds
    # that a wrongly scaled standard error (x1.5 either way) would break.
    model, timelines = caseload
    fit = fit_model(model, timelines, starts=1, intervals="wald")
    c = calibrate_intervals(fit.model, timelines, parameter_spec(model), fit.free_vector, fit.covariance, 8,
                            np.random.default_rng(21))
    assert 0.0 < c.exceed_fraction < 0.12, c
    assert c.multiplier < 1.3, c


def test_calibrated_wald_intervals_are_the_plain_ones_widened_by_the_multiplier_on_the_link_scale(caseload,
                                                                                                calibrated_wald):
    model, timelines = caseload
    plain = fit_model(model, timelines, starts=1, intervals="wald", rng=3)
    calibrated = calibrated_wald
    c = calibrated.calibration
    assert isinstance(c, IntervalCalibration) and c.draws == 6
    assert c.multiplier > 1.02          # so that the check below compares different widths
    np.testing.assert_allclose(calibrated.free_vector, plain.free_vector, rtol=0, atol=0)
    checked = 0
    for a, b in zip(plain.parameters + plain.mean_time_in_stage, calibrated.parameters + calibrated.mean_time_in_stage):
        if a.fixed or a.lower is None or a.kind not in ("rate", "observation", "mean_time_in_stage"):
            continue
        assert b.estimate == a.estimate
        assert _link_width(b) == pytest.approx(c.multiplier * _link_width(a), rel=1e-6), a.name
        checked += 1
    assert checked >= 8


def test_calibrated_profile_ends_sit_where_the_profile_deviance_reaches_the_calibrated_threshold(caseload):
    # The end of a profile interval for a coordinate (a log rate) checked with an independent constrained
    # maximisation by scipy.optimize.minimize (L-BFGS-B) over the other parameters: 2 (l_max - l_p) = c.
    model, timelines = caseload
    fit = fit_model(model, timelines, starts=1, intervals="profile", calibration_draws=4, rng=3)
    c = fit.calibration
    assert c.threshold > CHI2_95 + 0.2   # a calibrated end, not the chi-squared one
    spec = parameter_spec(model)
    plan = prepare(model, timelines, spec)
    theta = np.asarray(fit.free_vector)
    l_max = evaluate(plan, theta, gradient=False).log_likelihood
    i = spec.names.index("rate Unwell -> Well")
    estimate = next(e for e in fit.parameters if e.name == "rate Unwell -> Well (per day)")
    assert estimate.interval_kind == "profile"
    others = np.arange(theta.size) != i
    for end in (estimate.lower, estimate.upper):
        def negative(w, _end=end):
            full = theta.copy()
            full[others], full[i] = w, math.log(_end)
            e = evaluate(plan, full, gradient=True)
            return -e.log_likelihood, -e.gradient[others]

        bounds = [b for k, b in enumerate(zip(spec.lower, spec.upper)) if k != i]
        best = scipy.optimize.minimize(negative, theta[others], jac=True, method="L-BFGS-B", bounds=bounds)
        assert 2 * (l_max + best.fun) == pytest.approx(c.threshold, abs=0.05)


def test_the_fit_summary_keeps_and_states_the_calibration(calibrated_wald):
    summary = calibrated_wald.to_summary()
    again = FitSummary.from_dict(summary.to_dict())
    assert again.calibration == calibrated_wald.calibration
    assert f"widths calibrated by {summary.calibration.used} bootstrap refits" in again.interval_label()
    table = again.format_table()
    assert "calibration         widths calibrated by 6 refits of caseloads simulated from the fitted model" in table
    assert "caveat: " in table and "bootstrap-calibrated" in table
    older = summary.to_dict()
    del older["calibration"]                          # summaries stored before calibration existed
    assert FitSummary.from_dict(older).calibration is None


def test_no_calibration_for_a_penalised_fit_or_without_intervals(caseload):
    model, timelines = caseload
    assert fit_model(model, timelines, starts=1, penalised=True, intervals="wald",
                     calibration_draws=3).calibration is None
    assert fit_model(model, timelines, starts=1, intervals="none", calibration_draws=3).calibration is None


def test_a_callback_that_raises_stops_the_calibration_without_running_every_refit(caseload):
    model, timelines = caseload
    fit = fit_model(model, timelines, starts=1, intervals="wald")
    seen = []

    class Stop(Exception):
        pass

    def cancel(fraction):
        seen.append(fraction)
        raise Stop

    with pytest.raises(Stop):
        calibrate_intervals(fit.model, timelines, parameter_spec(model), fit.free_vector, fit.covariance, 30,
                            np.random.default_rng(1), threads=2, callback=cancel)
    assert 1 <= len(seen) <= 3        # the refits running when it raised, not all 30
