"""Known-stage sets that include an exact-entry stage, and contacts after a recorded entry.

The meaning (hmm.exact_entry.effective_allowed_stages): a set such as ``B|D`` is an ordinary "one of
these on that date" record, so D stays allowed with the probability P(prev -> D, gap) (entered on or
before that date); only a record of D alone dates the entry (density sum_r P(prev -> r) Q[r, D]).
The checks compare the forward algorithm with a brute-force sum over every stage sequence at the
contacts, written straight from that definition with scipy's expm.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.linalg

from hmm import Timelines
from hmm.inference import contacts_after_absorbing_entry, effective_allowed_stages, forward

from engine_helpers import model_from_matrices

A, B, D = 0, 1, 2
Q = np.array([[-0.025, 0.02, 0.005],
              [0.01, -0.02, 0.01],
              [0.0, 0.0, 0.0]])
INITIAL = np.array([0.7, 0.3, 0.0])
EMISSION = np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])


def _model():
    return model_from_matrices(Q, INITIAL, [EMISSION], exact_entry=[D])


def _brute_force(times, observations, known) -> float:
    """Likelihood of one case by enumerating every stage sequence at its contacts.

    ``known[k]`` is None (no known stage: any stage but the exact-entry D) or a set of stages.
    A single-stage record {D} whose previous contact was not {D} is the entry: its step is the
    density sum_{r != D} P(prev -> r, gap) Q[r, D]; every other step is P(prev -> next, gap).
    """
    allowed = [({A, B} if k is None else set(k)) for k in known]
    total = 0.0
    for path in itertools.product(range(3), repeat=len(times)):
        if any(s not in allowed[k] for k, s in enumerate(path)):
            continue
        weight = INITIAL[path[0]] * (EMISSION[path[0], observations[0]] if observations[0] >= 0 else 1.0)
        for k in range(1, len(times)):
            p = scipy.linalg.expm(Q * (times[k] - times[k - 1]))
            entry = known[k] == {D} and known[k - 1] != {D}
            if entry:
                step = sum(p[path[k - 1], r] * Q[r, D] for r in (A, B)) if path[k] == D else 0.0
            else:
                step = p[path[k - 1], path[k]]
            weight *= step * (EMISSION[path[k], observations[k]] if observations[k] >= 0 else 1.0)
        total += weight
    return total


def _timelines(cases):
    times, observations, allowed, offsets = [], [], [], [0]
    for case_times, case_obs, case_known in cases:
        for t, o, k in zip(case_times, case_obs, case_known):
            times.append(float(t))
            observations.append([o])
            mask = np.ones(3, dtype=bool) if k is None else np.isin(np.arange(3), sorted(k))
            allowed.append(mask)
        offsets.append(len(times))
    return Timelines(np.array(offsets, dtype=np.int64), np.array(times), np.array(observations, dtype=np.int16),
                     np.array(allowed, dtype=bool), np.zeros((len(times), 0)))


CASES = [
    ([0, 30], [0, 1], [None, {B, D}]),              # last contact: "B or already moved"
    ([0, 30, 60], [0, 1, -1], [None, {B, D}, {D}]),  # the set, then the dated entry
    ([0, 40], [1, 0], [None, {A, D}]),
    ([0, 20, 45], [0, -1, 1], [None, {D}, {B, D}]),  # entry, then a set that still allows D
    ([0, 25, 50], [0, 1, 0], [None, {B, D}, None]),  # an ordinary contact after the set rules D out
]


@pytest.mark.parametrize("case", range(len(CASES)))
def test_set_with_exact_entry_stage_matches_brute_force_enumeration(case):
    times, observations, known = CASES[case]
    result = forward(_model(), _timelines([CASES[case]]))
    expected = _brute_force(times, observations, known)
    assert expected > 0
    # reference: the brute-force sum over stage sequences above (scipy.linalg.expm for P(t))
    assert result.log_likelihood[0] == pytest.approx(np.log(expected), rel=1e-9, abs=1e-9)


def test_the_set_is_not_read_as_only_the_other_stage():
    times, observations, _ = CASES[0]
    with_set = forward(_model(), _timelines([CASES[0]])).log_likelihood[0]
    only_b = forward(_model(), _timelines([(times, observations, [None, {B}])])).log_likelihood[0]
    assert with_set > only_b + 0.1   # D (moved on or before day 30) adds real probability
    filtered = forward(_model(), _timelines([CASES[0]])).filtered[1]
    assert filtered[D] > 0.05 and filtered[A] == 0


def test_effective_allowed_stages_keeps_sets_and_drops_d_only_without_a_known_stage():
    model = _model()
    allowed = np.array([[1, 1, 1], [0, 1, 1], [0, 0, 1], [1, 1, 0]], dtype=bool)
    np.testing.assert_array_equal(effective_allowed_stages(model, allowed),
                                  [[1, 1, 0], [0, 1, 1], [0, 0, 1], [1, 1, 0]])


def test_contacts_after_absorbing_entry_points_at_the_entry_record():
    model = _model()
    timelines = _timelines([
        ([0, 20, 45, 60], [0, -1, 1, 0], [None, {D}, {B, D}, None]),  # row 3 contradicts row 1
        ([0, 30], [0, 1], [None, {B, D}]),                           # a set is not an entry record
        ([0, 10, 20], [0, -1, -1], [None, {D}, {D}]),                # a repeated record is fine
        ([0, 10, 20], [0, -1, -1], [None, {D}, {A}]),                # a known other stage contradicts row 10
    ])
    found = contacts_after_absorbing_entry(model, timelines.offsets, timelines.allowed_stages)
    np.testing.assert_array_equal(found, [-1, -1, -1, 1, -1, -1, -1, -1, -1, -1, -1, 10])
    # and the engine agrees: exactly the cases with a contradiction are impossible
    result = forward(model, timelines)
    np.testing.assert_array_equal(np.isneginf(result.log_likelihood), [True, False, False, True])
    np.testing.assert_array_equal(result.finite, [False, True, True, False])


def test_the_fitting_likelihood_reads_sets_the_same_way():
    from hmm.fitting.likelihood import log_likelihood_and_gradient

    model = _model()
    timelines = _timelines(CASES)
    value, _ = log_likelihood_and_gradient(model, timelines)
    # the fitting likelihood and the forward pass share effective_allowed_stages
    assert value == pytest.approx(forward(model, timelines).log_likelihood.sum(), rel=1e-10)
    expected = sum(np.log(_brute_force(*case)) for case in CASES)
    assert value == pytest.approx(expected, rel=1e-9)   # reference: the brute-force enumeration above
