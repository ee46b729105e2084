"""Interval coverage: do the fit's 95% intervals cover the true values about 95% of the time?

A simulation study, marked ``slow`` (not run in CI; ``pytest -m slow tests/fitting/test_coverage.py``).
The CI-speed parameter-recovery check is ``test_parameter_recovery_within_four_standard_errors`` in
test_fit.py.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import scipy.stats

from fitting_helpers import simulate, three_stage_model
from hmm.fitting import fit_model, parameter_spec
from hmm.fitting.uncertainty import derived_estimates, natural_estimates

N_CASELOADS = 200
N_CASES = 300
N_CONTACTS = 8
FAMILY_ERROR = 0.01     # chance that a correct implementation fails this test


def _coverage_bounds(n: int, k: int) -> tuple:
    """Acceptance range for the number of intervals (out of n) that cover the truth.

    If the intervals have exactly 95% coverage, the count for one parameter over n independent
    caseloads is Binomial(n, 0.95) (scipy.stats.binom). We test k parameters, so each two-sided
    check uses FAMILY_ERROR / k (Bonferroni), giving a false alarm rate of at most FAMILY_ERROR.
    Wald intervals are only asymptotically 95%, so a little under-coverage at 300 cases would still
    be a correct implementation of the method; these bounds catch what matters (intervals clearly
    too narrow or too wide, e.g. a wrong factor in the information matrix).
    """
    alpha = FAMILY_ERROR / k
    lower = scipy.stats.binom.ppf(alpha / 2, n, 0.95)
    upper = scipy.stats.binom.isf(alpha / 2, n, 0.95)
    return lower, upper


def _true_values(model) -> dict:
    """Every reported quantity of ``model`` itself, by the same code that reports a fit's estimates."""
    spec = parameter_spec(model)
    theta = spec.to_vector(model)
    none = np.zeros((spec.n_free, spec.n_free))
    natural = natural_estimates(spec, theta, none)
    _, mean_time, next_stage = derived_estimates(spec, theta, none)
    return {p.name: p.estimate for p in natural + mean_time + next_stage if not p.fixed}


@pytest.mark.slow
def test_95_percent_intervals_cover_the_truth_about_95_percent_of_the_time():
    truth = three_stage_model()
    true_values = None
    covered = []
    started = time.perf_counter()
    for replicate in range(N_CASELOADS):
        rng = np.random.default_rng([20261202, replicate])
        sim = simulate(truth, rng, n_cases=N_CASES, n_contacts=N_CONTACTS)
        # starting at the true model is usual in coverage studies and keeps starts=1 safe
        # (common practice, no source); the likelihood still has to be maximised from there
        result = fit_model(truth, sim.timelines, starts=1, intervals="wald")   # the Wald study
        assert result.converged, result.warnings
        free = [p for p in result.parameters + result.mean_time_in_stage + result.next_stage_probabilities
                if not p.fixed]
        if true_values is None:
            true_values = _true_values(truth)
            names = sorted(true_values)
            assert names == sorted(p.name for p in free)
        estimates = {p.name: p for p in free}
        covered.append([estimates[n].lower <= true_values[n] <= estimates[n].upper for n in names])
    elapsed = time.perf_counter() - started
    covered = np.array(covered)
    counts = covered.sum(axis=0)
    lower, upper = _coverage_bounds(N_CASELOADS, len(names))
    report = "\n".join(f"  {n:<50} {c / N_CASELOADS:.3f}" for n, c in zip(names, counts))
    print(f"\ncoverage of 95% intervals over {N_CASELOADS} caseloads of {N_CASES} cases "
          f"({elapsed:.0f} s; accept {lower:.0f}..{upper:.0f} of {N_CASELOADS} per quantity):\n{report}\n"
          f"  pooled: {covered.mean():.3f}")
    assert np.all(counts >= lower) and np.all(counts <= upper), report
    # Pooled over quantities: the average of correlated indicators has a standard deviation no larger than
    # one indicator's, sqrt(0.95 * 0.05 / N) = 0.015 for N = 200 (Cauchy-Schwarz), so 3 such SDs is a
    # conservative band (common practice, no source).
    assert abs(covered.mean() - 0.95) < 3 * np.sqrt(0.95 * 0.05 / N_CASELOADS)
