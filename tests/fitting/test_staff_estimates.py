"""A stage model from staff estimates (hmm/fitting/staff_estimates.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg

from hmm.fitting import parameter_spec
from hmm.fitting.staff_estimates import (CheckEstimate, StaffEstimateError, UsualResult, check_probabilities,
                                         model_from_staff_estimates, staff_estimate_problems,
                                         staff_estimates_from_model)
from hmm.fitting.uncertainty import derived_estimates


def estimates(**changes):
    """Invented estimates for three stages (Well, Unwell, Gone)."""
    out = dict(
        stages=("Well", "Unwell", "Gone"),
        typical_stay_days={"Well": 200.0, "Unwell": 80.0, "Gone": None},
        next_stage={"Well": {"Unwell": 1.0}, "Unwell": {"Well": 0.7, "Gone": 0.3}},
        initial={"Well": 0.8, "Unwell": 0.2},
        checks=(CheckEstimate("check", ("ok", "slow", "unable"),
                              {"Well": UsualResult("ok", 0.1), "Unwell": (0.2, 0.5, 0.3)}),),
        covariates=("alone",),
        hazard_ratios={("Well", "Unwell"): {"alone": 1.5}},
        follow_up_stages=("Unwell",),
        exact_entry_stages=("Gone",),
    )
    out.update(changes)
    return out


def reported(model):
    """Mean time in stage and next-stage probabilities as a fit reports them (uncertainty.derived_estimates)."""
    spec = parameter_spec(model)
    theta = spec.to_vector(model)
    _, mean_time, next_stage = derived_estimates(spec, theta, np.zeros((spec.n_free, spec.n_free)))
    return {p.name: p.estimate for p in mean_time}, {p.name: p.estimate for p in next_stage}


def test_rates_follow_the_jump_chain_and_round_trip_exactly():
    model = model_from_staff_estimates(**estimates())
    q = model.generator([0.0])
    # q_rr = -1 / mean stay, q_rs = share_rs / mean stay (Norris 1997, Markov Chains, section 2.6)
    np.testing.assert_allclose(q, [[-1 / 200, 1 / 200, 0], [0.7 / 80, -1 / 80, 0.3 / 80], [0, 0, 0]], rtol=1e-15)
    mean_time, next_stage = reported(model)
    assert mean_time["mean time in Well (days)"] == pytest.approx(200.0, rel=1e-14)
    assert mean_time["mean time in Unwell (days)"] == pytest.approx(80.0, rel=1e-14)
    assert next_stage["next stage after Unwell is Well"] == pytest.approx(0.7, rel=1e-14)
    assert next_stage["next stage after Unwell is Gone"] == pytest.approx(0.3, rel=1e-14)
    assert next_stage["next stage after Well is Unwell"] == pytest.approx(1.0, rel=1e-14)
    # hazard ratio 1.5 -> log hazard ratio log(1.5)
    assert model.transition("Well", "Unwell").effects == {"alone": pytest.approx(math.log(1.5), rel=1e-15)}
    assert model.generator([1.0])[0, 1] == pytest.approx(1.5 / 200, rel=1e-14)
    assert model.absorbing_stages == (2,) and model.exact_entry_stages == ("Gone",)


def test_mean_stay_by_simulation_of_the_jump_chain():
    # Independent check from P(t) = expm(Q t): the probability of still being in Well after t days, never
    # having left, is exp(-t / mean stay) because Well can only be left (Ross, Introduction to Probability
    # Models, ch. 6: sojourn times are exponential with rate -q_rr).
    model = model_from_staff_estimates(**estimates())
    p = scipy.linalg.expm(model.generator([0.0]) * 50.0)
    assert p[0, 0] >= math.exp(-50 / 200) - 1e-12          # may also have come back via Unwell
    # the expected time spent in Well before absorption, starting in Well, is the (0, 0) entry of
    # -Q_T^{-1} over the transient block (fundamental matrix; Norris 1997, section 3.3)
    q = model.generator([0.0])[:2, :2]
    expected_in_well = np.linalg.inv(-q)[0, 0]
    visits = 1 / 0.3                                          # returns to Well: geometric, 1 / P(absorb per round)
    assert expected_in_well == pytest.approx(200 * visits, rel=1e-12)


def test_wrong_share_is_spread_evenly_over_the_other_results():
    np.testing.assert_allclose(check_probabilities(("ok", "slow", "unable"), UsualResult("slow", 0.3)),
                               [0.15, 0.7, 0.15], rtol=1e-15)
    model = model_from_staff_estimates(**estimates())
    channel = model.channels[0]
    np.testing.assert_allclose(channel.probabilities, [[0.9, 0.05, 0.05], [0.2, 0.5, 0.3], [1 / 3, 1 / 3, 1 / 3]])
    assert channel.fixed_stages == frozenset({2})     # never checked in Gone: even row, fixed


def test_model_to_estimates_and_back(demo_model):
    again = model_from_staff_estimates(**staff_estimates_from_model(demo_model))
    np.testing.assert_allclose(again.baseline_rate_matrix(), demo_model.baseline_rate_matrix(), rtol=1e-14)
    np.testing.assert_allclose(again.effect_array(), demo_model.effect_array(), rtol=1e-14, atol=1e-15)
    np.testing.assert_allclose(again.initial, demo_model.initial)
    for a, b in zip(again.channels, demo_model.channels):
        np.testing.assert_allclose(a.probabilities[:4], b.probabilities[:4])
        assert a.fixed_stages == b.fixed_stages
    assert again.follow_up_stages == demo_model.follow_up_stages
    assert again.exact_entry_stages == demo_model.exact_entry_stages


@pytest.mark.parametrize("change, path, fragment", [
    (dict(next_stage={"Well": {"Unwell": 1.0}, "Unwell": {"Well": 0.7, "Gone": 0.2}}), ("next_stage", "Unwell"),
     "stage 'Unwell': the shares of where people go next add up to 0.9; expected 1"),
    (dict(typical_stay_days={"Well": -3, "Unwell": 80.0, "Gone": None}), ("typical_stay_days", "Well"),
     "stage 'Well': the typical stay must be a positive number of days"),
    (dict(typical_stay_days={"Well": 200.0, "Unwell": 80.0}), ("typical_stay_days", "Gone"),
     "stage 'Gone': no typical stay given"),
    (dict(typical_stay_days={"Well": 200.0, "Unwell": None, "Gone": None}), ("next_stage", "Unwell"),
     "stage 'Unwell' is marked 'never leaves' but has shares"),
    (dict(next_stage={"Well": {"Well": 1.0}, "Unwell": {"Well": 0.7, "Gone": 0.3}}), ("next_stage", "Well", "Well"),
     "a move to itself"),
    (dict(next_stage={"Well": {"Limbo": 1.0}, "Unwell": {"Well": 0.7, "Gone": 0.3}}),
     ("next_stage", "Well", "Limbo"), "unknown next stage 'Limbo'"),
    (dict(initial={"Well": 0.8}), ("initial",), "add up to 0.8; expected 1"),
    (dict(checks=(CheckEstimate("check", ("ok", "poor"), {"Well": UsualResult("ok", 0.0), "Unwell": (0.3, 0.7)}),)),
     ("checks", 0, "results", "Well", "wrong"), "check 'check', stage 'Well': how often the result is wrong"),
    (dict(checks=(CheckEstimate("check", ("ok", "poor"), {"Well": UsualResult("fine", 0.1), "Unwell": (0.3, 0.7)}),)),
     ("checks", 0, "results", "Well", "usual"), "the usual result 'fine' is not one of ok, poor"),
    (dict(checks=(CheckEstimate("check", ("ok", "poor"), {"Well": (0.5, 0.6), "Unwell": (0.3, 0.7)}),)),
     ("checks", 0, "results", "Well"), "the probabilities add up to 1.1; expected 1"),
    (dict(checks=(CheckEstimate("check", ("ok", "poor"), {"Well": (0.5, 0.5)}),)),
     ("checks", 0, "results", "Unwell"), "no results given for stage 'Unwell'"),
    (dict(hazard_ratios={("Well", "Unwell"): {"alone": 0.0}}), ("hazard_ratios", ("Well", "Unwell"), "alone"),
     "the hazard ratio of 'alone' must be a positive number"),
    (dict(hazard_ratios={("Well", "Gone"): {"alone": 2.0}}), ("hazard_ratios", ("Well", "Gone")),
     "no share of moves out of 'Well' goes to 'Gone'"),
    (dict(exact_entry_stages=("Unwell",)), ("exact_entry_stages", 0), "only for stages people never leave"),
])
def test_problems_name_the_stage_and_where(change, path, fragment):
    problems = staff_estimate_problems(**estimates(**change))
    assert problems, "expected a problem"
    assert problems[0].path == path
    assert fragment in problems[0].message
    with pytest.raises(StaffEstimateError) as info:
        model_from_staff_estimates(**estimates(**change))
    assert info.value.path == path and fragment in str(info.value)


def test_all_problems_are_listed_at_once():
    bad = estimates(typical_stay_days={"Well": "long", "Unwell": 80.0, "Gone": None},
                    initial={"Well": 0.5, "Unwell": 0.2})
    paths = [p.path for p in staff_estimate_problems(**bad)]
    assert ("typical_stay_days", "Well") in paths and ("initial",) in paths


def test_shares_within_tolerance_are_rescaled_to_exactly_one():
    model = model_from_staff_estimates(**estimates(next_stage={"Well": {"Unwell": 1.0},
                                                               "Unwell": {"Well": 0.7000004, "Gone": 0.3}}))
    rates = model.baseline_rate_matrix()
    assert 1 / rates[1].sum() == pytest.approx(80.0, rel=1e-14)
