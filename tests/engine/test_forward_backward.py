"""The shared forward-backward core (hmm.forward_backward) against a case-by-case reference."""

from __future__ import annotations

import numpy as np
import pytest

import hmm.forward_backward as core
from hmm.exact_entry import entry_steps, exact_entry_stage_mask
from hmm.forward_backward import case_layout, scaled_backward, scaled_forward
from hmm.model import Channel, StageModel, Transition


def _random_caseload(rng, n_cases, n_stages=3, n_matrices=4):
    counts = rng.integers(1, 7, size=n_cases)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    n = int(offsets[-1])
    likelihood = rng.uniform(0.05, 1.0, size=(n, n_stages))
    matrices = rng.uniform(size=(n_matrices, n_stages, n_stages))
    matrices /= matrices.sum(axis=2, keepdims=True)
    step_index = rng.integers(0, n_matrices, size=n)
    initial = rng.dirichlet(np.ones(n_stages))
    return offsets, likelihood, matrices, step_index, initial


def _reference(offsets, likelihood, matrices, step_index, initial):
    """Textbook scaled forward-backward, one case at a time (Rabiner 1989, eqs. 19-25 with scaling)."""
    n, s = likelihood.shape
    filtered, scale, beta = np.zeros((n, s)), np.zeros(n), np.ones((n, s))
    for case in range(offsets.size - 1):
        rows = range(offsets[case], offsets[case + 1])
        for j in rows:
            alpha = initial * likelihood[j] if j == rows[0] else (filtered[j - 1] @ matrices[step_index[j]]) * likelihood[j]
            scale[j] = alpha.sum()
            filtered[j] = alpha / scale[j]
        for j in reversed(rows[1:]):
            beta[j - 1] = matrices[step_index[j]] @ (likelihood[j] * beta[j] / scale[j])
    return filtered, scale, beta


@pytest.mark.parametrize("chunk", [3, core.CHUNK_ROWS])
@pytest.mark.parametrize("n_cases", [1, 57])
def test_recursions_match_case_by_case_reference(rng, monkeypatch, chunk, n_cases):
    monkeypatch.setattr(core, "CHUNK_ROWS", chunk)   # a small chunk walks every chunk boundary
    offsets, likelihood, matrices, step_index, initial = _random_caseload(rng, n_cases)
    layout = case_layout(offsets)
    pm_likelihood, pm_steps = likelihood[layout.order], step_index[layout.order]
    filtered, scale = scaled_forward(layout, initial, pm_likelihood, matrices, pm_steps)
    weighted = np.full_like(pm_likelihood, np.nan)
    beta = scaled_backward(layout, pm_likelihood, scale, matrices, pm_steps, weighted=weighted)
    want_filtered, want_scale, want_beta = _reference(offsets, likelihood, matrices, step_index, initial)
    np.testing.assert_allclose(layout.to_rows(filtered), want_filtered, rtol=1e-12)
    np.testing.assert_allclose(layout.to_rows(scale), want_scale, rtol=1e-12)
    np.testing.assert_allclose(layout.to_rows(beta), want_beta, rtol=1e-12)
    later = slice(int(layout.block_sizes[0]), None)
    np.testing.assert_allclose(weighted[later], (pm_likelihood * beta / scale[:, None])[later], rtol=1e-12)


def test_layout_of_a_subset_of_cases_is_a_prefix_structure(rng):
    offsets = np.array([0, 2, 7, 8, 12, 15], dtype=np.int64)   # 2, 5, 1, 4, 3 contacts
    layout = case_layout(offsets, np.array([0, 1, 3]))
    assert layout.cases.tolist() == [1, 3, 0]                 # longest first
    assert layout.block_sizes.tolist() == [3, 3, 2, 2, 1]
    assert layout.order[:3].tolist() == [2, 8, 0]             # first contacts
    assert layout.order[3:6].tolist() == [3, 9, 1]
    assert layout.case_of_rows().tolist() == [1, 3, 0, 1, 3, 0, 1, 3, 1, 3, 1]
    # the row before each row after position 0 is the same case's previous contact
    previous = layout.previous_rows()
    assert (layout.order[3:] - 1 == layout.order[previous]).all()


def _absorbing_model():
    return StageModel(stages=("Well", "Unwell", "Gone"), initial=np.array([0.7, 0.3, 0.0]),
                      transitions=(Transition(0, 1, 0.01), Transition(1, 2, 0.004)),
                      channels=(Channel("check", ("ok", "poor"), np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])),),
                      exact_entry_stages=("Gone",), name="absorbing")


def test_entry_steps_rule_by_hand():
    model = _absorbing_model()
    assert exact_entry_stage_mask(model).tolist() == [False, False, True]
    t, f = True, False
    allowed = np.array([[t, t, t],     # 0 nothing known
                        [f, f, t],     # 1 Gone alone: an entry (after row 0)
                        [f, f, t],     # 2 Gone alone again: a step within Gone, not an entry
                        [f, t, t],     # 3 Unwell|Gone: an ordinary set, not an entry
                        [f, f, t]])    # 4 Gone alone after a set: an entry
    into, before = np.array([1, 2, 3, 4]), np.array([0, 1, 2, 3])
    # the convention as written in hmm.inference's module docstring (common practice, no source: msm's
    # "exact death times" read one record as the entry date, Jackson 2011)
    assert entry_steps(model, allowed, into, before).tolist() == [True, False, False, True]


@pytest.mark.parametrize("n_stages", [1, 2, 5, 7, 8, 11])
def test_row_sums_are_numpys_sums_bit_for_bit(rng, n_stages):
    # scoring's outputs must not change by a bit: the column-by-column sum must equal numpy's own
    values = rng.uniform(size=(1000, n_stages)) * 10.0 ** rng.integers(-300, 5, size=(1000, n_stages))
    values[rng.uniform(size=values.shape) < 0.2] = 0.0
    out = np.empty(1000)
    core._row_sums(values, out)
    np.testing.assert_array_equal(out, values.sum(axis=1))
