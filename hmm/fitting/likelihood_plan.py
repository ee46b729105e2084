"""Parameter-free bookkeeping for the fitting likelihood: distinct steps, evidence patterns, case blocks.

Everything here depends only on the model's structure and the timelines, so it is built once per
fit (:func:`prepare`) and every likelihood evaluation reuses it:

* **distinct steps**: each step between two contacts is one (generator, gap, exact entry,
  unscheduled) pair; the step matrices and their derivatives are computed once per pair;
* **evidence patterns**: each contact is one distinct (recorded category of every channel,
  allowed stages) pattern, so the contact likelihoods are one lookup in a small table, and the
  expected category counts are sums per pattern;
* **case blocks**: the cases are dealt, longest first, into one block per thread; each block has
  its own position-major layout (:func:`hmm.forward_backward.case_layout`) and its own buffers, so
  the forward-backward passes of the blocks run in parallel (numpy releases the GIL) and only
  per-pair and per-pattern sums are added up.
"""

from __future__ import annotations

import os
import threading
from dataclasses import dataclass, field

import numpy as np

from ..exact_entry import effective_allowed_stages, entry_steps
from ..forward_backward import CaseLayout, case_layout
from ..model import StageModel
from ..timelines import Timelines
from ..transition import covariate_groups, factorise
from .parameters import ParameterSpec, parameter_spec

__all__ = ["LikelihoodPlan", "CaseBlock", "prepare", "default_threads", "MIN_CONTACTS_PER_THREAD"]

#: Below this many contacts per thread a caseload is evaluated in one block (threads cost more than they save).
MIN_CONTACTS_PER_THREAD = 50_000


def default_threads(n_contacts: int) -> int:
    """Threads for a caseload of ``n_contacts``: one per core (at most 4), one for small caseloads."""
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    return int(max(1, min(cores, 4, n_contacts // MIN_CONTACTS_PER_THREAD)))


@dataclass
class CaseBlock:
    """One thread's cases: their layout, step and evidence codes, and reusable buffers.

    Rows are the block's position-major rows (:class:`hmm.forward_backward.CaseLayout`).

    Attributes
    ----------
    layout : CaseLayout
    step_pair : ndarray of int32 (int64 past 2**31 rows), shape (n_rows,)
        Distinct pair of the step INTO each row (0, unused, at position 0).
    evidence : ndarray of int32, shape (n_rows,)
        Evidence pattern of each row.
    case_of_row : ndarray of int32, shape (n_rows,)
        Case (timelines index) of each row.
    steps_by_pair, previous_by_pair : ndarray of int32, shape (n_steps,)
        Rows of the steps (after position 0), sorted by pair, and the row before each.
    pair_starts : ndarray of int64, shape (m + 1,)
        ``steps_by_pair[pair_starts[p]:pair_starts[p + 1]]`` are the steps of pair ``p``.
    used_pairs : ndarray of int64
        Pairs with at least one step in this block.
    """

    layout: CaseLayout
    step_pair: np.ndarray
    evidence: np.ndarray
    case_of_row: np.ndarray
    steps_by_pair: np.ndarray
    previous_by_pair: np.ndarray
    pair_starts: np.ndarray
    used_pairs: np.ndarray
    buffers: dict = field(default_factory=dict, repr=False)

    @property
    def n_rows(self) -> int:
        return self.layout.n_rows

    def buffer(self, name: str, shape: tuple) -> np.ndarray:
        """A buffer kept between evaluations (fresh large arrays cost page faults every time)."""
        array = self.buffers.get(name)
        if array is None or array.shape != shape:
            array = self.buffers[name] = np.empty(shape)
        return array


@dataclass
class LikelihoodPlan:
    """Parameter-free bookkeeping for one (model structure, timelines); build with :func:`prepare`.

    Attributes
    ----------
    spec : ParameterSpec
    timelines : Timelines
    n_stages : int
    pair_generator : ndarray of int64, shape (m,)
    pair_gap : ndarray, shape (m,)
    pair_exact : ndarray of bool, shape (m,)
        Step into an exact-entry record (matrix ``P Q``).
    pair_unscheduled : ndarray of bool, shape (m,)
        Step into an unscheduled contact (matrix ``P Lambda``).
    generator_covariates : ndarray, shape (G, K)
        Distinct covariate rows starting a step.
    evidence_codes : ndarray of int64, shape (J, n_channels)
        Recorded category of each channel in each evidence pattern (-1 = not observed).
    evidence_allowed : ndarray, shape (J, S)
        0/1 allowed stages of each evidence pattern (after the exact-entry convention).
    evidence_one_hot : list of ndarray, each shape (J, C)
        Per channel: 1 at the pattern's recorded category (a zero row when not observed).
    blocks : list of CaseBlock
        One per thread.
    """

    spec: ParameterSpec
    timelines: Timelines
    n_stages: int
    pair_generator: np.ndarray
    pair_gap: np.ndarray
    pair_exact: np.ndarray
    pair_unscheduled: np.ndarray
    generator_covariates: np.ndarray
    evidence_codes: np.ndarray
    evidence_allowed: np.ndarray
    evidence_one_hot: list
    blocks: list
    lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    @property
    def n_pairs(self) -> int:
        return int(self.pair_gap.size)


def _check_shapes(model: StageModel, timelines: Timelines) -> None:
    if timelines.observations.shape[1] != len(model.channels):
        raise ValueError(f"timelines have {timelines.observations.shape[1]} channels, model has {len(model.channels)}")
    if timelines.covariates.shape[1] != model.n_covariates:
        raise ValueError(f"timelines have {timelines.covariates.shape[1]} covariates, model has {model.n_covariates}")
    for c, channel in enumerate(model.channels):
        codes = timelines.observations[:, c]
        if codes.size and codes.max() >= channel.n_categories:
            raise ValueError(f"channel {channel.name!r}: category code {codes.max()} out of range")


def _distinct_steps(model: StageModel, timelines: Timelines) -> tuple:
    """The distinct (generator, gap, exact entry, unscheduled) pairs and the pair of the step into each row.

    Returns
    -------
    pairs : dict of ndarray
        ``generator``, ``gap``, ``exact``, ``unscheduled`` (each shape (m,)) and ``covariates`` (G, K).
    row_pair : ndarray of int64, shape (n_contacts,)
        Pair of the step into each timelines row (0 for a case's first contact).
    """
    n = timelines.n_contacts
    into = np.ones(n, dtype=bool)
    into[timelines.first_index] = False
    into_rows = np.flatnonzero(into)
    from_rows = into_rows - 1
    covariates, generator_index = covariate_groups(timelines.covariates[from_rows])
    gaps = timelines.times[into_rows] - timelines.times[from_rows]
    gap_values, gap_codes = factorise(gaps)
    # the rule for which steps record an entry has one home (hmm.exact_entry.entry_steps)
    exact = entry_steps(model, timelines.allowed_stages, into_rows, from_rows)
    unscheduled = np.zeros(into_rows.size, dtype=bool)
    if model.unscheduled_contacts is not None:
        # a step into an unscheduled contact (not a record of exact entry) has the matrix P Lambda
        unscheduled = timelines.unscheduled_mask[into_rows] & ~exact
    key = ((generator_index * max(gap_values.size, 1) + gap_codes) * 2 + exact) * 2 + unscheduled
    keys, step_pair = factorise(key)
    flags = keys % 4
    pairs = {"generator": keys // 4 // max(gap_values.size, 1), "gap": gap_values[keys // 4 % max(gap_values.size, 1)]
             if keys.size else np.zeros(0), "exact": flags >= 2, "unscheduled": flags % 2 == 1,
             "covariates": covariates}
    row_pair = np.zeros(n, dtype=np.int64)
    row_pair[into_rows] = step_pair
    return pairs, row_pair


def _evidence_patterns(model: StageModel, timelines: Timelines) -> tuple:
    """Distinct (categories, allowed stages) patterns and the pattern of each row.

    Returns
    -------
    codes : ndarray of int64, shape (J, n_channels)
    allowed : ndarray, shape (J, S)
    row_pattern : ndarray of int64, shape (n_contacts,)
    """
    # the exact-entry convention has one home (hmm.exact_entry.effective_allowed_stages)
    allowed = effective_allowed_stages(model, timelines.allowed_stages)
    packed = np.packbits(allowed, axis=1, bitorder="little")
    n_channels = timelines.observations.shape[1]
    columns = np.concatenate([timelines.observations.astype(np.int64), packed.astype(np.int64)], axis=1)
    distinct, row_pattern = covariate_groups(columns)
    codes = distinct[:, :n_channels].astype(np.int64)
    bits = np.unpackbits(distinct[:, n_channels:].astype(np.uint8), axis=1, bitorder="little")
    return codes, bits[:, :model.n_stages].astype(float), row_pattern.astype(np.int64)


def _case_block(timelines: Timelines, cases: np.ndarray, row_pair: np.ndarray, row_pattern: np.ndarray,
                n_pairs: int) -> CaseBlock:
    layout = case_layout(timelines.offsets, cases)
    step_pair = np.take(row_pair, layout.order)
    first = int(layout.block_sizes[0]) if layout.n_positions else 0
    step_rows = np.arange(first, layout.n_rows, dtype=np.int64)
    previous = layout.previous_rows()
    sort = np.argsort(step_pair[step_rows], kind="stable")
    pair_starts = np.searchsorted(step_pair[step_rows][sort], np.arange(n_pairs + 1)).astype(np.int64)
    # 32-bit row numbers where they fit: half the memory of the per-row bookkeeping
    index = np.int32 if layout.n_rows < 2**31 and n_pairs < 2**31 else np.int64
    return CaseBlock(layout=layout, step_pair=step_pair.astype(index),
                     evidence=np.take(row_pattern, layout.order).astype(index),
                     case_of_row=layout.case_of_rows().astype(np.int32 if timelines.n_cases < 2**31 else np.int64),
                     steps_by_pair=step_rows[sort].astype(index), previous_by_pair=previous[sort].astype(index),
                     pair_starts=pair_starts, used_pairs=np.flatnonzero(np.diff(pair_starts) > 0))


def prepare(model: StageModel, timelines: Timelines, spec: ParameterSpec | None = None,
            threads: int | None = None) -> LikelihoodPlan:
    """Precompute everything that does not depend on parameter values.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    spec : ParameterSpec, optional
        Defaults to ``parameter_spec(model)``.
    threads : int, optional
        Case blocks evaluated in parallel (default :func:`default_threads`). The log-likelihood
        does not depend on it beyond rounding (sums are added block by block).
    """
    spec = parameter_spec(model) if spec is None else spec
    _check_shapes(model, timelines)
    pairs, row_pair = _distinct_steps(model, timelines)
    codes, allowed, row_pattern = _evidence_patterns(model, timelines)
    one_hot = []
    for c, channel in enumerate(model.channels):
        hot = np.zeros((codes.shape[0], channel.n_categories))
        seen = np.flatnonzero(codes[:, c] >= 0)
        hot[seen, codes[seen, c]] = 1.0
        one_hot.append(hot)
    threads = default_threads(timelines.n_contacts) if threads is None else max(1, int(threads))
    longest_first = np.argsort(-timelines.n_contacts_per_case, kind="stable")
    blocks = [_case_block(timelines, longest_first[b::threads], row_pair, row_pattern, pairs["gap"].size)
              for b in range(min(threads, max(timelines.n_cases, 1)))]
    return LikelihoodPlan(
        spec=spec, timelines=timelines, n_stages=model.n_stages, pair_generator=pairs["generator"].astype(np.int64),
        pair_gap=np.asarray(pairs["gap"], dtype=float), pair_exact=pairs["exact"],
        pair_unscheduled=pairs["unscheduled"], generator_covariates=pairs["covariates"], evidence_codes=codes,
        evidence_allowed=allowed, evidence_one_hot=one_hot, blocks=blocks)
