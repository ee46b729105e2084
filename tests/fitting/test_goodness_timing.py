"""Goodness of fit with informative contact timing: replicates draw unscheduled contacts from the model."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import scipy.stats
from fitting_helpers import three_stage_model

from hmm.fitting import goodness_of_fit
from hmm.fitting.goodness import _replicate, _schedule
from hmm.model import UnscheduledContacts
from hmm.simulate import simulate_caseload

CONTACT_RATES = np.array([0.004, 0.03, 0.0])


def timing_model():
    """Without exact entry: a case that leaves keeps its scheduled contacts, so every replicate covers the
    same time as the data (with exact entry a replicate stops at the earlier of the two exits)."""
    return replace(three_stage_model(exact_entry=False),
                   unscheduled_contacts=UnscheduledContacts(CONTACT_RATES.copy()))


def caseload(model, rng, n_cases=150):
    schedule = [np.arange(0.0, 640.0, float(rng.integers(56, 113))) for _ in range(n_cases)]
    covariates = rng.integers(0, 2, size=(n_cases, 1)).astype(float)
    return simulate_caseload(model, schedule, covariates, rng, missing_probability=0.1).timelines


def test_replicates_keep_scheduled_dates_and_draw_unscheduled_contacts(rng):
    model = timing_model()
    observed = caseload(model, rng, n_cases=60)
    schedule = _schedule(model, observed)
    replicate = _replicate(model, schedule, rng)
    kept = ~replicate.unscheduled & (replicate.allowed_stages.sum(axis=1) > 1)
    observed_scheduled = ~observed.unscheduled & (observed.allowed_stages.sum(axis=1) > 1)
    # scheduled dates are kept (cases that left earlier in the replicate stop earlier)
    assert set(replicate.times[kept]) <= set(observed.times[observed_scheduled])
    assert replicate.unscheduled.any()
    # and nothing happens after a case's last recorded contact
    assert np.all(replicate.times[replicate.last_index] <= observed.times[observed.last_index] + 1e-9)
    # the observed number of unscheduled contacts is a typical replicate's (same model, same schedule):
    # within 4 standard deviations of 12 replicates (common practice, no source)
    counts = np.array([_replicate(model, schedule, rng).unscheduled.sum() for _ in range(12)])
    assert abs(observed.unscheduled.sum() - counts.mean()) < 4 * counts.std(ddof=1)


@pytest.mark.slow
def test_p_values_are_roughly_uniform_for_a_correctly_specified_timing_model(seed):
    """40 caseloads simulated from the timing model, each checked with 19 bootstrap replicates drawn from the
    same model: the p-values should be uniform on {1/20, ..., 1} (exchangeable replicates; Davison & Hinkley
    1997, section 4.2). Kolmogorov-Smirnov against the uniform (scipy.stats.kstest), at 1%."""
    model = timing_model()
    rng = np.random.default_rng(seed)
    p_values = []
    for _ in range(40):
        observed = caseload(model, rng, n_cases=120)
        result = goodness_of_fit(model, observed, bootstrap=19, rng=rng, gap_bands=2, covariate_groups=False)
        p_values.append(result.p_value)
    p_values = np.array(p_values)
    print("p-values:", np.round(np.sort(p_values), 2), "mean", p_values.mean())
    # a discrete uniform on k/20: compare with a continuous uniform after jittering within each step
    jittered = p_values - rng.uniform(0.0, 1.0 / 20, p_values.size)
    assert scipy.stats.kstest(jittered, "uniform").pvalue > 0.01
    assert 0.3 < p_values.mean() < 0.7
