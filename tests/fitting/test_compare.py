"""Honest comparisons: nesting, the boundary caveat, penalised fits refused, the parametric bootstrap."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from fitting_helpers import simulate, three_stage_model
from hmm.fitting import fit_model
from hmm.fitting.compare import bootstrap_p_value, likelihood_ratio_test, nesting
from hmm.model import Transition


def _without_move_back(model):
    t = model.transitions
    return dataclasses.replace(model, transitions=(t[0], t[2]))      # no Unwell -> Well


def test_nesting_names_the_extra_parameters_and_the_boundary():
    general = three_stage_model()
    no_effect = dataclasses.replace(general, transitions=(Transition(0, 1, 0.01),) + general.transitions[1:])
    nest = nesting(no_effect, general)
    assert nest.nested and nest.extra == ("effect of alone on Well -> Unwell",) and nest.boundary == ()
    dropped = nesting(_without_move_back(general), general)
    assert dropped.nested and dropped.boundary == ("rate Unwell -> Well",)     # a rate held at 0
    reverse = nesting(general, _without_move_back(general))
    assert not reverse.nested and "rate Unwell -> Well" in reverse.reason
    other = nesting(three_stage_model(with_covariate=False), general)
    assert not other.nested and "covariates" in other.reason


def test_penalised_fits_are_refused_with_the_reason():
    model = three_stage_model()
    sim = simulate(model, np.random.default_rng(3), n_cases=60, n_contacts=5)
    plain = fit_model(model, sim.timelines, starts=1, intervals="wald")
    restricted = fit_model(_without_move_back(model), sim.timelines, starts=1, intervals="wald")
    penalised = fit_model(model, sim.timelines, starts=1, penalised=True, intervals="wald")
    assert likelihood_ratio_test(restricted, plain).df == 1
    with pytest.raises(ValueError, match="not a maximum of the likelihood"):
        likelihood_ratio_test(restricted, penalised)
    # the stored summaries compare the same way
    assert likelihood_ratio_test(restricted.to_summary(), plain.to_summary()).df == 1


def test_parametric_bootstrap_p_value_is_seeded_and_in_range():
    model = three_stage_model(with_covariate=False)
    sim = simulate(model, np.random.default_rng(5), n_cases=40, n_contacts=4)
    general = fit_model(model, sim.timelines, starts=1, intervals="none")
    restricted = fit_model(_without_move_back(model), sim.timelines, starts=1, intervals="none")
    statistic = likelihood_ratio_test(restricted, general).statistic
    seen = []
    p1, values = bootstrap_p_value(restricted.model, general.model, sim.timelines, statistic, 4,
                                   np.random.default_rng(9), callback=seen.append)
    p2, _ = bootstrap_p_value(restricted.model, general.model, sim.timelines, statistic, 4, np.random.default_rng(9))
    assert p1 == p2 and values.shape == (4,) and np.all(values >= 0)
    # p = (1 + #{T* >= T}) / (B + 1) (Davison & Hinkley 1997, eq. 4.11): one of 1/5 .. 5/5
    assert p1 in {k / 5 for k in range(1, 6)} and p1 == (1 + np.sum(values >= statistic - 1e-9)) / 5
    assert seen[-1] == 1.0
