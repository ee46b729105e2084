"""What-if forecasts against direct computation with the changed generator (scipy.linalg.expm)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from caseview.errors import InputError
from caseview.followup import caseload_whatif, default_rules, whatif_forecast
from caseview.scoring import score_loaded
from followup_helpers import BAD, CALM, MIXED, build_caseload, day

AS_OF = "2026-11-30"


@pytest.fixture
def scores(demo_model):
    cases = [
        ("HS-0001", "C1", [("2026-06-01", MIXED, {"lives_alone": 1}), ("2026-11-01", MIXED, {"lives_alone": 1})]),
        ("HS-0002", "C1", [("2026-06-01", CALM, {}), ("2026-11-20", BAD, {})]),
        ("HS-0003", "C2", [("2026-09-01", CALM, {}), ("2026-11-15", {"mobility": "slow"}, {"balance_programme": 1})]),
        ("HS-0004", "C2", [("2026-07-01", MIXED, {}), ("2026-10-01", MIXED, {"lives_alone": 1})]),
    ]
    return score_loaded(build_caseload(demo_model, cases), demo_model, day(AS_OF), 120.0)


def direct(model, p_now, x, horizon):
    """p_now expm(Q(x) h), and reach probabilities from the generator with the target rows zeroed
    (first passage by making the target absorbing; Norris 1997, sec. 3.3) - scipy only."""
    q = model.generator(x)
    at = p_now @ scipy.linalg.expm(q * horizon)
    reach = np.empty(model.n_stages)
    for s in range(model.n_stages):
        absorbing = q.copy()
        absorbing[s, :] = 0.0
        reach[s] = (p_now @ scipy.linalg.expm(absorbing * horizon))[s]
    mask = model.follow_up_mask
    joint = q.copy()
    joint[mask, :] = 0.0
    reach_fu = (p_now @ scipy.linalg.expm(joint * horizon))[mask].sum()
    return at, reach, reach_fu


def test_whatif_matches_changed_generator(demo_model, scores):
    for case_id in scores.case_ids:
        w = whatif_forecast(scores, case_id, changes={"balance_programme": 1.0})
        row = scores.row_of(case_id)
        p_now = scores.p_now[row]
        x = scores.last_covariates[row]
        changed_x = x.copy()
        changed_x[demo_model.covariates.index("balance_programme")] = 1.0
        np.testing.assert_allclose(w.unchanged.p_now, p_now)
        np.testing.assert_allclose(w.changed.p_now, p_now)  # the change applies from now on only
        for forecast, covariates in ((w.unchanged, x), (w.changed, changed_x)):
            at, reach, reach_fu = direct(demo_model, p_now, covariates, 120.0)
            np.testing.assert_allclose(forecast.p_at_horizon, at, atol=1e-10)
            np.testing.assert_allclose(forecast.p_reach, reach, atol=1e-10)
            assert forecast.p_reach_follow_up == pytest.approx(reach_fu, abs=1e-10)
            assert forecast.p_follow_up_at_horizon == pytest.approx(at[demo_model.follow_up_mask].sum(), abs=1e-12)
    # Enrolling lowers the follow-up risk for a case not yet enrolled (negative log hazard ratios).
    w = whatif_forecast(scores, "HS-0001", changes={"balance_programme": 1.0})
    assert w.changed.p_reach_follow_up < w.unchanged.p_reach_follow_up
    # HS-0003 is already enrolled: no change at all.
    w = whatif_forecast(scores, "HS-0003", changes={"balance_programme": 1.0})
    np.testing.assert_allclose(w.changed.p_at_horizon, w.unchanged.p_at_horizon)


def test_whatif_horizon_override(demo_model, scores):
    w = whatif_forecast(scores, "HS-0002", horizon=30.0, changes={"lives_alone": 0.0})
    row = scores.row_of("HS-0002")
    at, _, _ = direct(demo_model, scores.p_now[row], np.array([0.0, 0.0]), 30.0)
    np.testing.assert_allclose(w.changed.p_at_horizon, at, atol=1e-10)


@pytest.mark.parametrize("case_id, changes, words", [
    ("HS-0001", {"no_such": 1.0}, "not in the model"),
    ("HS-0001", {"balance_programme": float("nan")}, "finite"),
    ("HS-0001", {"balance_programme": "yes"}, "expected a number"),
    ("HS-9999", {"balance_programme": 1.0}, "no case 'HS-9999'"),
])
def test_whatif_bad_input(scores, case_id, changes, words):
    with pytest.raises(InputError, match=words):
        whatif_forecast(scores, case_id, changes=changes)


def test_caseload_counts_match_direct(demo_model, scores):
    # Thresholds chosen between the with- and without-change probabilities of these cases, so the
    # counts differ and the comparison means something.
    rules = default_rules().with_changes(["in_follow_up_now.threshold=0.46", "likely_to_reach_follow_up.threshold=0.66"])
    result = caseload_whatif(scores, {"balance_programme": 1.0}, rules)
    mask = demo_model.follow_up_mask
    flagged_without = flagged_with = reach_without = reach_with = 0
    for row in range(scores.n_cases):
        x = scores.last_covariates[row]
        changed_x = x.copy()
        changed_x[1] = 1.0
        at0, _, r0 = direct(demo_model, scores.p_now[row], x, 120.0)
        at1, _, r1 = direct(demo_model, scores.p_now[row], changed_x, 120.0)
        flagged_without += at0[mask].sum() >= 0.46
        flagged_with += at1[mask].sum() >= 0.46
        reach_without += r0 >= 0.66
        reach_with += r1 >= 0.66
    assert (result.flagged_at_horizon_without, result.flagged_at_horizon_with) == (flagged_without, flagged_with)
    assert (result.reaching_without, result.reaching_with) == (reach_without, reach_with)
    assert result.flagged_at_horizon_with < result.flagged_at_horizon_without
    assert result.reaching_with < result.reaching_without
    unchanged = caseload_whatif(scores, {}, rules)
    assert unchanged.flagged_at_horizon_with == unchanged.flagged_at_horizon_without == flagged_without
