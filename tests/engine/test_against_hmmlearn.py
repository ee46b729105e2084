"""Forward, forward-backward and Viterbi agree with hmmlearn's discrete-time HMM on equal gaps.

Reference: hmmlearn.hmm.CategoricalHMM with transmat_ = expm(Q * gap) (scipy.linalg.expm). With
equal gaps the continuous-time model is exactly that discrete-time HMM.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.linalg
from hmmlearn.hmm import CategoricalHMM

from engine_helpers import model_from_matrices, random_emissions, random_generator
from hmm import Timelines, forward, most_likely_path, smoothed_probabilities

GAP = 9.0


def _case_data(rng, n_cases, n_stages, n_categories_per_channel, method_seed_stages=None):
    q = random_generator(rng, n_stages, 0.01, 0.2)
    initial = rng.dirichlet(np.ones(n_stages))
    emissions = [random_emissions(rng, n_stages, c) for c in n_categories_per_channel]
    model = model_from_matrices(q, initial, emissions)
    lengths = rng.integers(1, 9, size=n_cases)
    offsets = np.concatenate([[0], np.cumsum(lengths)])
    n = offsets[-1]
    times = np.concatenate([GAP * np.arange(m) + rng.integers(0, 50) for m in lengths]).astype(float)
    observations = np.column_stack([rng.integers(0, c, size=n) for c in n_categories_per_channel])
    timelines = Timelines(offsets=offsets.astype(np.int64), times=times,
                          observations=observations.astype(np.int16),
                          allowed_stages=np.ones((n, n_stages), bool), covariates=np.zeros((n, 0)))
    return model, timelines, q, initial, emissions


def _reference_hmm(q, initial, emissions):
    """hmmlearn model; several channels become one joint symbol with product emissions."""
    n_stages = q.shape[0]
    sizes = [e.shape[1] for e in emissions]
    joint = np.ones((n_stages, int(np.prod(sizes))))
    for j, combo in enumerate(itertools.product(*[range(c) for c in sizes])):
        for c, category in enumerate(combo):
            joint[:, j] *= emissions[c][:, category]
    hmm = CategoricalHMM(n_components=n_stages, init_params="", params="")
    hmm.n_features = joint.shape[1]
    hmm.startprob_ = initial
    hmm.transmat_ = scipy.linalg.expm(q * GAP)
    hmm.emissionprob_ = joint
    return hmm, sizes


def _joint_symbols(observations, sizes):
    symbol = np.zeros(observations.shape[0], dtype=int)
    for c, size in enumerate(sizes):
        symbol = symbol * size + observations[:, c]
    return symbol[:, None]


@pytest.mark.parametrize("method", ["eigen", "expm"])
@pytest.mark.parametrize("channels", [(3,), (2, 3, 2)], ids=["one-channel", "three-channels"])
@pytest.mark.parametrize("n_cases", [1, 40], ids=["one-case", "many-cases"])
def test_matches_hmmlearn(method, channels, n_cases, rng):
    model, timelines, q, initial, emissions = _case_data(rng, n_cases, 3, channels)
    reference, sizes = _reference_hmm(q, initial, emissions)
    symbols = _joint_symbols(timelines.observations.astype(int), sizes)

    result = forward(model, timelines, method=method)
    smoothed = smoothed_probabilities(model, timelines, method=method)
    path = most_likely_path(model, timelines, method=method)
    for i in range(timelines.n_cases):
        rows = slice(timelines.offsets[i], timelines.offsets[i + 1])
        x = symbols[rows]
        # hmmlearn: score = log P(sequence); predict_proba = smoothed posteriors; decode = Viterbi.
        assert result.log_likelihood[i] == pytest.approx(reference.score(x), abs=1e-9)
        np.testing.assert_allclose(smoothed[rows], reference.predict_proba(x), atol=1e-9)
        _, states = reference.decode(x, algorithm="viterbi")
        np.testing.assert_array_equal(path[rows], states)
    np.testing.assert_allclose(result.filtered.sum(axis=1), 1.0, atol=1e-12)
