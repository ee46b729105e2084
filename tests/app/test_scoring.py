"""caseview.scoring against the tests' reference filter (tests/reference_filter.py: loop by loop, scipy.linalg.expm)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import expm

from caseview.dates import from_day, to_day

from caseview.scoring import score_loaded
from caseview.storage.caseload import Caseload
from hmm.simulate import simulate_caseload
from reference_filter import reference_p_now


@pytest.fixture
def demo_model(demo_model):
    # Simulated without exact entries, so compare on the model without exact-entry stages (the
    # exact-entry likelihood has its own hand-worked checks in tests/engine).
    from dataclasses import replace

    return replace(demo_model, exact_entry_stages=())


@pytest.fixture
def caseload(demo_model, rng):
    n = 40
    contact_times = [np.sort(rng.uniform(19000, 20300, size=rng.integers(1, 9))).round() for _ in range(n)]
    covariates = [np.column_stack([np.full(len(t), rng.integers(2)), (np.arange(len(t)) >= 3).astype(float)])
                  for t in contact_times]
    sim = simulate_caseload(demo_model, contact_times, covariates, rng, missing_probability=0.2, exact_entry=False)
    tl = sim.timelines
    return Caseload(case_ids=np.array([f"HS-{i:04d}" for i in range(tl.n_cases)], dtype=object),
                    coordinators=np.array(["C1"] * tl.n_cases, dtype=object),
                    contact_days=tl.times.astype(np.int64), timelines=tl, raw_values={})


def test_scores_match_a_contact_by_contact_reference(demo_model, caseload):
    as_of = 20200
    scores = score_loaded(caseload, demo_model, as_of, horizon_days=90)
    tl = caseload.timelines
    assert scores.n_cases == np.count_nonzero(tl.times[tl.first_index] <= as_of)
    for row, case in enumerate(scores.case_rows):
        rows = slice(tl.offsets[case], tl.offsets[case + 1])
        keep = tl.times[rows] <= as_of
        expected = reference_p_now(demo_model, tl.times[rows][keep], tl.observations[rows][keep],
                                  tl.allowed_stages[rows][keep], tl.covariates[rows][keep], as_of)
        np.testing.assert_allclose(scores.p_now[row], expected, atol=1e-10)
        q = demo_model.generator(tl.covariates[rows][keep][-1])
        np.testing.assert_allclose(scores.p_at_horizon[row], expected @ expm(q * 90), atol=1e-10)
        # Reaching the follow-up stages within H: make them absorbing and propagate (first-passage argument,
        # e.g. Norris, Markov Chains, 1997, sec. 3.3).
        target = demo_model.follow_up_mask
        q_absorbing = q.copy()
        q_absorbing[target] = 0.0
        reach = (expected @ expm(q_absorbing * 90))[target].sum()
        assert scores.p_reach_follow_up[row] == pytest.approx(reach, abs=1e-10)
        assert scores.days_since_contact[row] == as_of - tl.times[rows][keep][-1]


def test_scores_are_probabilities(demo_model, caseload):
    scores = score_loaded(caseload, demo_model, 20300, horizon_days=365)
    for p in (scores.p_now, scores.p_at_horizon):
        np.testing.assert_allclose(p.sum(axis=1), 1.0, atol=1e-9)
        assert np.all((p >= 0) & (p <= 1))
    assert np.all(scores.p_reach >= scores.p_now - 1e-12)
    assert np.all(scores.p_reach_follow_up >= scores.p_follow_up_now - 1e-12)


def test_no_case_before_as_of_gives_empty_scores(demo_model, caseload):
    scores = score_loaded(caseload, demo_model, 1000, horizon_days=90)
    assert scores.n_cases == 0 and scores.p_now.shape == (0, demo_model.n_stages)


def test_day_conversion_round_trips():
    import datetime as dt

    assert to_day(dt.date(1970, 1, 2)) == 1
    assert from_day(to_day(dt.date(2026, 11, 30))) == dt.date(2026, 11, 30)
