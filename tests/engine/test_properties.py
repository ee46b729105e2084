"""Property tests (hypothesis): invariants of P(t) and of the forward-backward output."""

from __future__ import annotations

import numpy as np
import scipy.linalg
from hypothesis import given, settings
from hypothesis import strategies as st

from engine_helpers import model_from_matrices, random_emissions
from hmm import Timelines, forward, smoothed_probabilities
from hmm.transition import transition_matrices

log_rates = st.floats(min_value=-6.0, max_value=0.0)  # rates 1e-6 .. 1 per day


@st.composite
def generators(draw):
    n = draw(st.integers(2, 5))
    exponents = np.array(draw(st.lists(log_rates, min_size=n * n, max_size=n * n))).reshape(n, n)
    present = np.array(draw(st.lists(st.booleans(), min_size=n * n, max_size=n * n))).reshape(n, n)
    q = np.where(present, 10.0 ** exponents, 0.0)
    np.fill_diagonal(q, 0.0)
    np.fill_diagonal(q, -q.sum(axis=1))
    return q


gap_lists = st.lists(st.floats(min_value=0.0, max_value=20_000.0), min_size=1, max_size=6)


@settings(max_examples=80, deadline=None)
@given(q=generators(), gaps=gap_lists)
def test_transition_rows_are_distributions(q, gaps):
    gaps = np.array(gaps)
    for method in ("auto", "expm"):
        p = transition_matrices(q[None], gaps, np.zeros(gaps.size, int), method=method)
        assert np.all(p >= 0.0) and np.all(p <= 1.0)
        np.testing.assert_allclose(p.sum(axis=2), 1.0, atol=1e-12)
    # The auto path (eigen where judged safe) agrees with scipy's expm (Al-Mohy-Higham).
    reference = scipy.linalg.expm(q[None] * gaps[:, None, None])
    auto = transition_matrices(q[None], gaps, np.zeros(gaps.size, int), method="auto")
    np.testing.assert_allclose(auto, np.clip(reference, 0, None) / np.clip(reference, 0, None).sum(2, keepdims=True),
                               atol=1e-7)


@settings(max_examples=40, deadline=None)
@given(q=generators(), seed=st.integers(0, 2**32 - 1), n_cases=st.integers(1, 6))
def test_forward_backward_outputs_are_valid(q, seed, n_cases):
    rng = np.random.default_rng(seed)
    n_stages = q.shape[0]
    emission = 0.05 + 0.95 * random_emissions(rng, n_stages, 3)
    emission /= emission.sum(axis=1, keepdims=True)
    model = model_from_matrices(q, rng.dirichlet(np.ones(n_stages)), [emission])
    lengths = rng.integers(1, 6, n_cases)
    n = lengths.sum()
    times = np.concatenate([np.cumsum(rng.uniform(0, 3000, m)) for m in lengths])
    timelines = Timelines.from_contacts(np.repeat(np.arange(n_cases), lengths), times,
                                        rng.integers(-1, 3, (n, 1)), np.ones((n, n_stages), bool), np.zeros((n, 0)))
    result = forward(model, timelines)
    assert np.all(np.isfinite(result.log_likelihood)) and np.all(result.log_likelihood <= 1e-12)
    np.testing.assert_allclose(result.filtered.sum(axis=1), 1.0, atol=1e-10)
    smoothed = smoothed_probabilities(model, timelines, forward_result=result)
    np.testing.assert_allclose(smoothed.sum(axis=1), 1.0, atol=1e-10)
    assert np.all(smoothed >= 0) and np.all(result.filtered >= 0)
