"""Parameter draws for the outlook's bands come from the fit's stored covariance (built by fitting)."""

from __future__ import annotations

import sys
from pathlib import Path
from dataclasses import replace

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.followup.parameter_draws import draw_models, fit_covariance
from hmm.fitting import fit_model

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fitting"))
from fitting_helpers import simulate, three_stage_model  # noqa: E402


def _stored_version(version_id, result):
    """The ModelVersion a workspace returns for a fitted model (the summary as its stored JSON)."""
    import json

    from caseview.modelfile import dump_model
    from caseview.storage.workspace import ModelVersion

    stored = json.loads(json.dumps(result.to_summary().to_dict(), allow_nan=False))
    return ModelVersion(version_id, "2026-12-03T09:00:00Z", "fitted", dump_model(result.model), stored, True)


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(20261203)
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=300)
    result = fit_model(model, sim.timelines, rng=np.random.default_rng(1))
    return result, _stored_version(7, result)


def test_draws_have_the_fitted_mean_and_covariance(fitted):
    result, version = fitted
    draws = draw_models(result.model, version, 4000, np.random.default_rng(3))
    assert not draws.kept_fixed
    names = list(result.parameter_names)
    rates = np.array([[np.log(t.rate) for t in m.transitions] for m in draws.models])
    slots = [names.index(f"rate {a} -> {b}") for a, b in (("Well", "Unwell"), ("Unwell", "Well"), ("Unwell", "Gone"))]
    fitted_rates = np.log([t.rate for t in result.model.transitions])
    block = result.covariance[np.ix_(slots, slots)]
    se = np.sqrt(np.diag(block))
    assert np.all(np.abs(rates.mean(axis=0) - fitted_rates) < 4 * se / np.sqrt(4000))
    assert np.allclose(np.cov(rates.T), block, rtol=0.1, atol=0.1 * se.max() ** 2)
    effects = np.array([m.transitions[0].effects["alone"] for m in draws.models])
    assert effects.std() == pytest.approx(np.sqrt(result.covariance[names.index(
        "effect of alone on Well -> Unwell"), names.index("effect of alone on Well -> Unwell")]), rel=0.1)
    initial = np.array([m.initial for m in draws.models])
    assert np.allclose(initial.sum(axis=1), 1.0) and np.all(initial[:, 2] == 0.0)
    assert initial[:, 0].mean() == pytest.approx(result.model.initial[0], abs=0.02)


def test_an_unidentified_effect_is_kept_at_its_fitted_value_and_named(rng):
    """The covariate never varies, so its effect has a flat likelihood: no usable variance."""
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=200)
    timelines = sim.timelines
    flat = type(timelines).from_contacts(np.repeat(np.arange(timelines.n_cases), np.diff(timelines.offsets)),
                                         timelines.times, timelines.observations, timelines.allowed_stages,
                                         np.zeros_like(timelines.covariates))
    result = fit_model(model, flat, rng=np.random.default_rng(2))
    version = _stored_version(3, result)
    draws = draw_models(result.model, version, 50, np.random.default_rng(1))
    assert draws.kept_fixed == ["effect of alone on Well -> Unwell"]
    assert {m.transitions[0].effects["alone"] for m in draws.models} == {result.model.transitions[0].effects["alone"]}
    assert len({m.transitions[1].rate for m in draws.models}) == 50


def test_refuses_models_without_a_fit_covariance(fitted):
    result, version = fitted
    with pytest.raises(InputError, match="entered, not fitted"):
        fit_covariance(replace(version, id=1, fit_summary=None))
    old = {k: v for k, v in version.fit_summary.items() if k != "covariance"}
    with pytest.raises(InputError, match="fitted before caseview stored"):
        draw_models(result.model, replace(version, id=2, fit_summary=old), 5, np.random.default_rng(1))
