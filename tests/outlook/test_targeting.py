"""Targeting: reductions are per-case what-if forecasts; the three ways of filling places compared."""

from __future__ import annotations

import numpy as np
import pytest

from caseview.followup.outlook import open_case_rows
from caseview.followup.targeting import random_choices, rank_places
from caseview.followup.whatif import whatif_forecast


def test_ranking_uses_each_case_what_if_forecast_and_benefit_beats_risk_and_chance(scores):
    pool = open_case_rows(scores).rows
    result = rank_places(scores, pool, {"balance_programme": 1.0}, 12, 180.0, "all", seed=5)
    assert result.n_ranked == 12 and np.all(np.diff(result.reduction) <= 0)
    for i in (0, 5, 11):
        w = whatif_forecast(scores, result.case_ids[i], horizon=180.0, changes={"balance_programme": 1.0})
        assert result.p_reach_without[i] == pytest.approx(w.unchanged.p_reach_follow_up, abs=1e-12)
        assert result.p_reach_with[i] == pytest.approx(w.changed.p_reach_follow_up, abs=1e-12)
    assert result.averted_by_benefit == pytest.approx(result.reduction.sum())
    mean, low, high = result.averted_at_random
    assert result.averted_by_benefit >= result.averted_by_risk and result.averted_by_benefit >= high
    # the mean over random choices estimates N x the pool's mean reduction (exact expectation)
    everyone = rank_places(scores, pool, {"balance_programme": 1.0}, pool.size, 180.0, "all", seed=1)
    expected = 12 * everyone.reduction.mean()
    spread = (high - low) / 3.92
    assert abs(mean - expected) < 4 * spread / np.sqrt(result.n_random_draws) + 1e-12
    assert low <= mean <= high


def test_random_choices_are_seeded_and_cover_small_pools():
    reduction = np.array([0.3, 0.1, 0.0, 0.2])
    a = random_choices(reduction, 2, np.random.default_rng(1))
    assert a == random_choices(reduction, 2, np.random.default_rng(1))
    assert random_choices(reduction, 10, np.random.default_rng(1)) == pytest.approx((0.6, 0.6, 0.6))
