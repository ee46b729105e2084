"""Small stage models and simulated caseloads shared by the fitting tests."""

from __future__ import annotations

import numpy as np

from hmm.model import Channel, StageModel, Transition
from hmm.simulate import simulate_caseload


def three_stage_model(with_covariate: bool = True, exact_entry: bool = True) -> StageModel:
    """Well -> Unwell <-> back, Unwell -> Gone (absorbing), one binary covariate, two channels."""
    effects = {"alone": 0.5} if with_covariate else {}
    return StageModel(
        stages=("Well", "Unwell", "Gone"),
        initial=np.array([0.7, 0.3, 0.0]),
        transitions=(
            Transition(0, 1, 0.010, dict(effects)),
            Transition(1, 0, 0.006),
            Transition(1, 2, 0.004),
        ),
        channels=(
            Channel("check", ("ok", "poor"), np.array([[0.85, 0.15], [0.25, 0.75], [0.5, 0.5]]),
                    fixed_stages=frozenset({2})),
            Channel("report", ("none", "some", "many"),
                    np.array([[0.7, 0.2, 0.1], [0.2, 0.4, 0.4], [0.3, 0.3, 0.4]]), fixed_stages=frozenset({2})),
        ),
        covariates=("alone",) if with_covariate else (),
        exact_entry_stages=("Gone",) if exact_entry else (),
        name="three stage test model",
    )


def progressive_equal_rates() -> StageModel:
    """A progressive chain with equal rates: its generator is defective (no eigenbasis)."""
    return StageModel(
        stages=("A", "B", "C"),
        initial=np.array([0.8, 0.2, 0.0]),
        transitions=(Transition(0, 1, 0.02), Transition(1, 2, 0.02)),
        channels=(Channel("sign", ("low", "high"), np.array([[0.9, 0.1], [0.4, 0.6], [0.1, 0.9]])),),
        name="defective chain",
    )


def irregular_times(rng, n_cases: int, n_contacts: int = 10, low: int = 5, high: int = 60) -> list:
    return [np.concatenate([[0.0], np.cumsum(rng.integers(low, high, size=n_contacts - 1))]).astype(float)
            for _ in range(n_cases)]


def simulate(model, rng, n_cases=300, n_contacts=10, missing=0.1, exact_entry=True):
    covariates = rng.integers(0, 2, size=(n_cases, model.n_covariates)).astype(float)
    return simulate_caseload(model, irregular_times(rng, n_cases, n_contacts), covariates, rng,
                             missing_probability=missing, exact_entry=exact_entry)
