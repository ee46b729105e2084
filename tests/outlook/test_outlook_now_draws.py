"""Parameter uncertainty reaches each case's stage probabilities now, not only the forecast (issue 18)."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from caseview.followup import now_draws
from caseview.followup.now_draws import NowUnderDraws, shifted_sums, stratified_sample
from caseview.followup.occupancy import group_sums
from caseview.followup.outlook import compute_outlook, open_case_rows
from caseview.followup.parameter_draws import draw_models
from caseview.followup.referrals import ReferralAssumption
from hmm.fitting.parameters import parameter_spec
from hmm.forecasting import stage_probabilities_now
from outlook_helpers import AS_OF, scored_caseload

NONE = ReferralAssumption("none", 0.0, covariates=np.zeros((1, 2)), weights=np.ones(1))


def _version(model, standard_error: float):
    """A stored fit summary for ``model`` whose free parameters all have this standard error."""
    names = list(parameter_spec(model).names)
    covariance = (standard_error ** 2 * np.eye(len(names))).tolist()
    from hmm.fitting import FitSummary

    # the stored JSON of a summary (read back through FitSummary.from_dict like every stored fit)
    stored = FitSummary(-100.0, -100.0, False, len(names), 50, 400, 0.0, 0.0, 10, 20, True,
                        free_parameters=tuple(names), covariance=tuple(map(tuple, covariance))).to_dict()
    return SimpleNamespace(id=5, fit_summary=stored)


def _outlook(scores, model, standard_error, draws=40, seed=3, now_sample=None, rng_seed=11):
    drawn = draw_models(model, _version(model, standard_error), draws, np.random.default_rng(seed))
    return compute_outlook(scores, AS_OF, 6, NONE, open_case_rows(scores), drawn, None, seed,
                           now_sample=now_sample, now_rng=np.random.default_rng(rng_seed))


def test_draws_move_every_parameter_and_keep_structural_zeros(demo_model):
    drawn = draw_models(demo_model, _version(demo_model, 0.3), 20, np.random.default_rng(1))
    assert len(drawn.drawn) == len(parameter_spec(demo_model).names) and not drawn.at_fit.any()
    for m in drawn.models:
        for fitted, channel in zip(demo_model.channels, m.channels):
            assert np.allclose(channel.probabilities.sum(axis=1), 1.0)
            assert np.array_equal(channel.probabilities == 0, fitted.probabilities == 0)
        assert np.isclose(m.initial.sum(), 1.0) and np.array_equal(m.initial == 0, demo_model.initial == 0)
    mobility = np.array([m.channels[0].probabilities for m in drawn.models])
    assert mobility.std(axis=0).max() > 0.01  # the check results are drawn too: they decide "now"


def test_draws_at_the_fitted_values_give_exactly_the_outlook_without_uncertainty(demo_model, rng):
    scores = scored_caseload(demo_model, 120, rng)
    drawn = draw_models(demo_model, _version(demo_model, 0.0), 5, np.random.default_rng(2))
    assert drawn.at_fit.all()
    for m in drawn.models:  # the fitted numbers themselves, not exp(log(rate))
        assert [t.rate for t in m.transitions] == [t.rate for t in demo_model.transitions]
        assert all(np.array_equal(a.probabilities, b.probabilities) for a, b in zip(m.channels, demo_model.channels))
    open_cases = open_case_rows(scores)
    plain = compute_outlook(scores, AS_OF, 6, NONE, open_cases)
    mixed = compute_outlook(scores, AS_OF, 6, NONE, open_cases, drawn, None, 2)
    for name in ("expected", "lower_95", "upper_95", "entries_expected"):
        assert np.array_equal(getattr(mixed, name), getattr(plain, name)), name


def test_carrying_draws_into_now_widens_the_bands_of_a_small_caseload(demo_model, rng, monkeypatch):
    """Large parameter uncertainty (standard error 0.4 on every log rate and logit), 150 cases."""
    scores = scored_caseload(demo_model, 150, rng)
    with_now = _outlook(scores, demo_model, 0.4)
    assert with_now.now_rescored == with_now.n_open  # small caseload: every case rescored under every draw
    assert "every drawn model" in with_now.describe_uncertainty()
    monkeypatch.setattr(NowUnderDraws, "under", lambda self, model, at_fit=False: (None, None))
    forecast_only = _outlook(scores, demo_model, 0.4)                    # the same draws, "now" left at the fit
    width_now = with_now.upper_95 - with_now.lower_95
    width_forecast = forecast_only.upper_95 - forecast_only.lower_95
    assert width_now.sum() > 1.15 * width_forecast.sum()
    assert np.all(width_now[0] >= width_forecast[0]) and width_now[0].sum() > width_forecast[0].sum()
    assert np.array_equal(with_now.expected, forecast_only.expected)   # expected counts: the fitted model's


def test_reproducible_with_the_seed(demo_model, rng):
    scores = scored_caseload(demo_model, 100, rng)
    first, again = _outlook(scores, demo_model, 0.3, seed=4), _outlook(scores, demo_model, 0.3, seed=4)
    other = _outlook(scores, demo_model, 0.3, seed=5)
    assert np.array_equal(first.lower_95, again.lower_95) and np.array_equal(first.upper_95, again.upper_95)
    assert not (np.array_equal(first.lower_95, other.lower_95) and np.array_equal(first.upper_95, other.upper_95))


def test_shifted_power_sums_equal_the_sums_of_shifted_probabilities(rng):
    p = rng.dirichlet(np.ones(4), size=300)
    group = rng.integers(0, 3, 300)
    shift = rng.normal(0, 0.02, (3, 4))
    shift -= shift.mean(axis=1, keepdims=True)
    direct = group_sums(p + shift[group], group, 3)
    moved = shifted_sums(group_sums(p, group, 3), np.bincount(group, minlength=3), shift)
    for name in ("first", "second", "third"):
        assert np.allclose(getattr(moved, name), getattr(direct, name), rtol=1e-12, atol=1e-10), name


def test_the_stratified_sample_covers_every_group(rng):
    group = np.repeat([0, 1, 2], [5000, 900, 30])
    sample = stratified_sample(group, 3, 1000, rng)
    counts = np.bincount(group[sample], minlength=3)
    assert counts[2] == 30 and counts[1] >= now_draws.MIN_PER_GROUP and abs(counts.sum() - 1000) < 60
    assert np.array_equal(stratified_sample(group, 3, 10_000, rng), np.arange(group.size))


def test_the_sampled_now_agrees_with_rescoring_every_case(demo_model, rng):
    """The bands from a 400-case sample against every case rescored (same draws), 1,500 cases."""
    scores = scored_caseload(demo_model, 1500, rng)
    sampled = _outlook(scores, demo_model, 0.25, draws=30, now_sample=400)
    everyone = _outlook(scores, demo_model, 0.25, draws=30, now_sample=0)
    assert sampled.now_rescored < 600 and everyone.now_rescored == everyone.n_open
    assert "random sample" in sampled.describe_uncertainty()
    width = everyone.upper_95 - everyone.lower_95
    for name in ("lower_95", "upper_95"):
        gap = np.abs(getattr(sampled, name) - getattr(everyone, name))
        assert np.all(gap <= 0.1 * width + 3), (name, gap.max(), width.max())
    # the estimator's first sums are exact for the sampled cases and unbiased for the rest
    model = draw_models(demo_model, _version(demo_model, 0.25), 1, np.random.default_rng(3)).models[0]
    open_rows = open_case_rows(scores).rows
    group = np.zeros(open_rows.size, dtype=np.int64)
    now = NowUnderDraws(scores.timelines.subset(open_rows), scores.p_now[open_rows], group, 1, scores.as_of_day,
                        np.random.default_rng(1), sample_size=open_rows.size)
    sums, probabilities = now.under(model)
    direct = stage_probabilities_now(model, scores.timelines.subset(open_rows), float(scores.as_of_day))
    assert np.allclose(probabilities(), direct) and np.allclose(sums.first[0], direct.sum(axis=0))


def test_a_case_that_cannot_be_scored_under_a_draw_keeps_its_fitted_probabilities(demo_model, rng, monkeypatch):
    import hmm.forecasting

    scores = scored_caseload(demo_model, 40, rng)
    open_rows = open_case_rows(scores).rows
    now = NowUnderDraws(scores.timelines.subset(open_rows), scores.p_now[open_rows],
                        np.zeros(open_rows.size, dtype=np.int64), 1, scores.as_of_day, np.random.default_rng(1))
    real = hmm.forecasting.stage_probabilities_now

    def overflowing(model, timelines, as_of):   # what the engine gives a case whose drawn rates overflow
        p = real(model, timelines, as_of)
        p[::3] = np.nan
        return p

    monkeypatch.setattr(hmm.forecasting, "stage_probabilities_now", overflowing)
    p = now.rescored(demo_model)
    assert np.array_equal(p[::3], scores.p_now[open_rows][::3]) and np.all(np.isfinite(p))


@pytest.mark.parametrize("same_in_every_stage", [False, True])
def test_unscheduled_contact_rates_are_drawn_too(demo_model, same_in_every_stage):
    from dataclasses import replace

    from hmm.model import UnscheduledContacts

    rates = np.where(np.arange(demo_model.n_stages) < 4, 0.01, 0.0)
    model = replace(demo_model, unscheduled_contacts=UnscheduledContacts(
        rates, {"lives_alone": 0.3}, same_in_every_stage=same_in_every_stage))
    drawn = draw_models(model, _version(model, 0.2), 30, np.random.default_rng(4))
    contact = np.array([m.unscheduled_contacts.rates for m in drawn.models])
    assert np.all(contact[:, rates == 0] == 0) and contact[:, 0].std() > 0
    assert np.allclose(contact[:, 0], contact[:, 1]) == same_in_every_stage
    effects = [m.unscheduled_contacts.effects["lives_alone"] for m in drawn.models]
    assert np.std(effects) == pytest.approx(0.2, rel=0.4)
    at_fit = draw_models(model, _version(model, 0.0), 2, np.random.default_rng(4)).models[0]
    assert np.array_equal(at_fit.unscheduled_contacts.rates, rates)
