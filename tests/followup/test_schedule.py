"""Next contact due against a brute-force day-by-day search with scipy.linalg.expm, and closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg

from caseview.followup.schedule import NEVER, days_until_threshold, next_contact_due_day


def brute_force(model, probabilities, covariates, threshold, limit):
    """For each case, the first day d = 0..limit with (p expm(Q d))[follow-up] >= threshold."""
    mask = model.follow_up_mask
    out = np.full(probabilities.shape[0], NEVER)
    cache = {}
    for i, (p, x) in enumerate(zip(probabilities, covariates)):
        key = tuple(x)
        if key not in cache:  # scipy reference, no engine code: expm(Q d) for every day d
            q = model.generator(x)
            cache[key] = np.stack([scipy.linalg.expm(q * d) for d in range(limit + 1)])
        for d in range(limit + 1):
            if (p @ cache[key][d])[mask].sum() >= threshold:
                out[i] = d
                break
    return out


@pytest.mark.parametrize("groups_for_matrix_products", [64, 0])  # per covariate row / all rows gathered
@pytest.mark.parametrize("block_days", [1, 30, 400])
def test_matches_brute_force_on_demo_model(demo_model, rng, block_days, groups_for_matrix_products, monkeypatch):
    monkeypatch.setattr("caseview.followup.schedule._GROUPS_FOR_MATRIX_PRODUCTS", groups_for_matrix_products)
    n, limit = 12, 400
    probabilities = rng.dirichlet(np.ones(demo_model.n_stages) * 0.7, size=n)
    probabilities[:, demo_model.follow_up_mask] *= 0.5  # most start under the threshold
    probabilities /= probabilities.sum(axis=1, keepdims=True)
    covariates = rng.integers(0, 2, size=(n, demo_model.n_covariates)).astype(float)
    threshold = 0.35
    expected = brute_force(demo_model, probabilities, covariates, threshold, limit)
    got = days_until_threshold(demo_model, probabilities, covariates, threshold, limit, block_days)
    np.testing.assert_array_equal(got, expected)
    assert (expected == NEVER).any() or (expected > 0).any()  # the draw exercises the search


def test_pure_slipping_case_against_brute_force(demo_model):
    # A case certainly in Slipping now, living alone: the search must find a day > 0.
    p = np.zeros((2, demo_model.n_stages))
    p[:, demo_model.stage_index("Slipping")] = 1.0
    covariates = np.array([[1.0, 0.0], [1.0, 1.0]])
    expected = brute_force(demo_model, p, covariates, 0.2, 730)
    got = days_until_threshold(demo_model, p, covariates, 0.2, 730)
    np.testing.assert_array_equal(got, expected)
    assert (got > 0).all() and got[1] > got[0]  # the programme slows decline (negative log hazard ratios)


def test_closed_form_on_toy_chain(toy_model):
    # Known in Worse, Bad absorbing at rate b: P(Bad at t) = 1 - exp(-b t), so the first whole day
    # reaching 0.5 is ceil(ln 2 / b) (exponential distribution median).
    p = np.array([[0.0, 1.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.4, 0.6], [1.0, 0.0, 0.0]])
    x = np.array([[0.0], [1.0], [0.0], [0.0]])
    b = np.array([0.02, 0.02 * math.exp(-0.7)])
    got = next_contact_due_day(toy_model, p, x, 0.5, as_of_day=20000, limit_days=730)
    assert got[0] == 20000 + math.ceil(math.log(2) / b[0])
    assert got[1] == 20000 + math.ceil(math.log(2) / b[1])
    assert got[2] == 20000  # already over: due on the as-of date
    # From Well the hypoexponential CDF 1 - 2e^{-0.01 t} + e^{-0.02 t} reaches 0.5 at t = 122.8 days
    # (solve (1 - e^{-0.01 t})^2 = 0.5: e^{-0.01 t} = 1 - sqrt(0.5)).
    assert got[3] == 20000 + math.ceil(-math.log(1 - math.sqrt(0.5)) / 0.01)


def test_never_within_limit_is_minus_one(toy_model):
    p = np.array([[1.0, 0.0, 0.0]])
    assert next_contact_due_day(toy_model, p, np.zeros((1, 1)), 0.5, 20000, limit_days=100)[0] == -1
    assert next_contact_due_day(toy_model, p, np.zeros((1, 1)), 0.5, 20000, limit_days=123)[0] == 20123
