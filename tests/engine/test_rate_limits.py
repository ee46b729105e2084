"""Rates that overflow: the model refuses them, and one case's overflow never stops the others."""

from __future__ import annotations

import numpy as np
import pytest

from hmm import ModelError, Timelines
from hmm.forecasting import forecast, reach_probability, stage_probabilities_now
from hmm.inference import forward
from hmm.model import MAX_RATE_PER_DAY, rate_limit_problem
from hmm.transition import transition_matrices

from engine_helpers import model_from_matrices

Q = np.array([[-0.02, 0.015, 0.005],
              [0.01, -0.03, 0.02],
              [0.0, 0.0, 0.0]])


def _model(effect=0.4, ranges=()):
    from dataclasses import replace

    model = model_from_matrices(Q, [0.6, 0.4, 0.0], [np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])],
                                effects={(0, 1): {"x": 0.0}}, covariates=("x",))
    transitions = tuple(replace(t, effects={"x": effect}) if t.effects else t for t in model.transitions)
    return replace(model, transitions=transitions, covariate_ranges=ranges)


@pytest.mark.parametrize("method", ["eigen", "expm"])
def test_matrices_stay_stochastic_at_the_rate_limit_over_the_longest_gap(method):
    # The bound's comment promises this: Q * gap up to 1.1e15 still gives row-stochastic matrices.
    q = np.array([[-MAX_RATE_PER_DAY, MAX_RATE_PER_DAY, 0.0],
                  [1e-3, -2e-3, 1e-3],
                  [0.0, 0.0, 0.0]])
    gaps = np.array([1.0, 365.0, 110_000.0])
    try:
        p = transition_matrices(q[None], gaps, np.zeros(3, dtype=np.int64), method)
    except ValueError:
        assert method == "eigen"   # the eigen path may refuse; "auto" then uses expm
        p = transition_matrices(q[None], gaps, np.zeros(3, dtype=np.int64), "auto")
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    np.testing.assert_allclose(p.sum(axis=2), 1.0, atol=1e-9)
    # stage 0 is left at once: from it, the chain is where stage 1 would take it (common practice, no source)
    np.testing.assert_allclose(p[:, 0, 0], 0.0, atol=1e-9)


def test_model_refuses_rates_that_overflow():
    with pytest.raises(ModelError, match="above the limit"):
        _model().with_rates({("stage0", "stage1"): 1e100})
    with pytest.raises(ModelError, match="above the limit"):
        _model(effect=800.0)                              # no range declared: checked over -1..1
    with pytest.raises(ModelError, match="above the limit"):
        _model(effect=30.0, ranges=((0.0, 1.0),))         # 0.015 * exp(30) = 1.6e11
    _model(effect=30.0, ranges=((-5.0, 0.5),))            # the same effect is fine over these values
    with pytest.raises(ModelError, match="vanish in floating point"):
        _model(effect=-800.0, ranges=((0.0, 1.0),))       # exp(-800) underflows: the move would silently vanish
    # the largest fitted values (rate 10 per day, log hazard ratio 20) pass on a 0..1 covariate
    assert rate_limit_problem(10.0, {"x": 20.0}, {"x": (0.0, 1.0)}) is None
    assert "x = 1" in rate_limit_problem(10.0, {"x": 25.0}, {"x": (0.0, 1.0)})


def test_usable_covariate_rows_marks_overflow_without_warnings():
    model = _model()
    with np.errstate(all="raise"):
        ok = model.usable_covariate_rows(np.array([[0.0], [1.0], [1000.0], [1e6], [np.inf], [-1e6]]))
    # 0.015 * exp(0.4 * 1000) = 7.8e171 is finite but far above the limit
    np.testing.assert_array_equal(ok, [True, True, False, False, False, True])


def test_one_case_with_an_overflowing_covariate_does_not_stop_the_others():
    model = _model()
    times = [[0, 30, 90], [0, 40], [0, 10, 50, 80]]
    x = [[0, 1, 0], [1e6, 1], [1, 1000, 1, 0]]
    obs = [[0, 1, 1], [0, 0], [1, 1, 0, 0]]

    def build(cases):
        offsets = np.concatenate([[0], np.cumsum([len(times[c]) for c in cases])]).astype(np.int64)
        flat = lambda lists: np.concatenate([np.asarray(lists[c], float) for c in cases])  # noqa: E731
        n = int(offsets[-1])
        return Timelines(offsets, flat(times), flat(obs).astype(np.int16).reshape(n, 1),
                         np.ones((n, 3), dtype=bool), flat(x).reshape(n, 1))

    everything = forward(model, build([0, 1, 2]))   # raised "generator matrices must be finite" for all
    np.testing.assert_array_equal(everything.finite, [True, False, False])
    assert np.isnan(everything.log_likelihood[1:]).all()
    alone = forward(model, build([0]))
    assert everything.log_likelihood[0] == alone.log_likelihood[0]           # bitwise: nothing leaks across
    np.testing.assert_array_equal(everything.filtered[:3], alone.filtered)
    assert np.isnan(everything.filtered[3:]).all()
    # forecasting: the case's last covariates overflow -> nan rows, the others as alone
    timelines = build([0, 1, 2])
    last = timelines.covariates[timelines.last_index]
    last[2] = 1e6
    p = np.full((3, 3), 1 / 3)
    ahead = forecast(model, p, last, 90.0)
    np.testing.assert_array_equal(np.isnan(ahead.at_horizon).any(axis=1), [False, False, True])
    reach = reach_probability(model, p, last, 90.0, np.array([False, True, False]))
    np.testing.assert_array_equal(np.isnan(reach), [False, False, True])
    np.testing.assert_array_equal(forecast(model, p[:1], last[:1], 90.0).at_horizon, ahead.at_horizon[:1])
    now = stage_probabilities_now(model, timelines, 120.0, filtered=everything.filtered)
    np.testing.assert_array_equal(np.isnan(now).any(axis=1), [False, True, True])
