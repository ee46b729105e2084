"""One-step-ahead predictions of each contact's evidence, and observed versus expected occupancy over time.

Both goodness-of-fit checks (:mod:`hmm.fitting.goodness`) compare what was recorded at a contact
with what the model predicted *before* seeing that contact: the stage distribution at contact
``j`` given the evidence at the case's earlier contacts,

    ``predicted_j = filtered_{j-1} @ P_j``   (``P_j = expm(Q(x_{j-1}) gap_j)``, the step into ``j``),

with ``predicted_j = initial`` at a case's first contact. ``filtered`` and the step matrices come
from one :func:`hmm.inference.forward` pass over the whole caseload (no second forward
algorithm). The prediction is then restricted to the stages the contact allows (a recorded stage,
and the exact-entry convention: an ordinary contact is never in an exact-entry stage, because an
entry into one is always recorded and ends the ordinary contacts) and renormalised. The predicted
probability of category ``k`` in channel ``c`` is ``predicted_j @ E_c[:, k]``.

Occupancy over calendar time uses these one-step-ahead predictions, not the filtered or smoothed
probabilities: those already condition on the contact's own evidence, so their "expected"
occupancy would agree with the observed one by construction. Because the observed-minus-predicted
indicators form a martingale difference sequence, the variance of a bin's observed proportion
under the model is ``sum_j p_j (1 - p_j) / n^2`` even though contacts of one case are dependent;
that is the standard error reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..exact_entry import exact_entry_stage_mask
from ..inference import ForwardResult, effective_allowed_stages, forward
from ..model import StageModel
from ..timelines import Timelines

__all__ = ["OneStepPredictions", "one_step_predictions", "OccupancyOverTime", "occupancy_over_calendar_time"]

_CHUNK = 200_000   # contacts per gathered block of step matrices (bounds memory)


@dataclass(frozen=True)
class OneStepPredictions:
    """Stage predictions made before each contact, with what the forward pass knew at each contact.

    Attributes
    ----------
    predicted : ndarray, shape (n_contacts, n_stages)
        P(stage at contact j | evidence at the case's earlier contacts, stages allowed at j).
        A row of zeros where the prediction is not usable (see ``usable``).
    filtered : ndarray, shape (n_contacts, n_stages)
        P(stage at contact j | evidence up to and including contact j) (:func:`hmm.inference.forward`).
    usable : ndarray of bool, shape (n_contacts,)
        False for records of entry into (or stay in) an exact-entry stage, which carry no evidence,
        and for contacts whose history is impossible under the model.
    n_impossible : int
        Contacts dropped because the model gives their history (or allowed stages) probability zero.
    """

    predicted: np.ndarray
    filtered: np.ndarray
    usable: np.ndarray
    n_impossible: int

    def category_probabilities(self, model: StageModel, channel: int, rows=None) -> np.ndarray:
        """Predicted probability of each category of one channel, shape (n_contacts or len(rows), n_categories)."""
        predicted = self.predicted if rows is None else self.predicted[rows]
        return np.einsum("ns,sk->nk", predicted, model.emission_matrices()[channel])


def one_step_predictions(model: StageModel, timelines: Timelines,
                         forward_result: ForwardResult | None = None) -> OneStepPredictions:
    """One-step-ahead stage predictions for every contact of every case.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    forward_result : ForwardResult, optional
        ``hmm.inference.forward(model, timelines)`` if already computed.

    Returns
    -------
    OneStepPredictions
    """
    if forward_result is None or forward_result._plan is None:
        forward_result = forward(model, timelines)
    plan = forward_result._plan
    filtered = forward_result.filtered
    n, n_stages = timelines.n_contacts, model.n_stages
    predicted = np.zeros((n, n_stages))
    predicted[timelines.first_index] = np.asarray(model.initial, dtype=float)
    step_index = plan.to_rows(plan.step_index) if n else np.zeros(0, dtype=np.int64)
    later = np.flatnonzero(step_index >= 0)
    for start in range(0, later.size, _CHUNK):
        rows = later[start:start + _CHUNK]
        predicted[rows] = np.einsum("ns,nst->nt", filtered[rows - 1],
                                    np.take(plan.step_matrices, step_index[rows], axis=0))
    allowed = effective_allowed_stages(model, timelines.allowed_stages)
    exact = exact_entry_stage_mask(model)
    # a record of being in an exact-entry stage: no evidence, and its step matrix is an entry density
    entry_record = ~(allowed & ~exact).any(axis=1) if n else np.zeros(0, dtype=bool)
    predicted *= allowed
    total = predicted.sum(axis=1)
    possible = total > 0
    predicted /= np.where(possible, total, 1.0)[:, None]
    usable = possible & ~entry_record
    predicted[~usable] = 0.0
    return OneStepPredictions(predicted, filtered, usable, int(np.count_nonzero(~possible & ~entry_record)))


@dataclass(frozen=True)
class OccupancyOverTime:
    """Observed versus expected share of each category of each channel, per calendar-time bin.

    One *series* per (channel, category). Expected shares are means of one-step-ahead predictions
    (see the module docstring); a bin without contacts holds ``nan``.

    Attributes
    ----------
    bin_edges : ndarray, shape (n_bins + 1,)
        Days (same origin as the timelines' times); bin ``b`` is ``[edges[b], edges[b+1])``, the
        last bin closed on the right.
    channel : list of str, length n_series
    category : list of str, length n_series
    observed : ndarray, shape (n_series, n_bins)
        Share of the contacts in the bin (with that channel recorded) that recorded the category.
    expected : ndarray, shape (n_series, n_bins)
        Mean predicted probability of the category over the same contacts.
    standard_error : ndarray, shape (n_series, n_bins)
        ``sqrt(sum_j p_j (1 - p_j)) / n``: the standard error of ``observed`` under the model.
    n_contacts : ndarray of int64, shape (n_series, n_bins)
        Contacts in the bin with that channel recorded.
    """

    bin_edges: np.ndarray
    channel: list
    category: list
    observed: np.ndarray
    expected: np.ndarray
    standard_error: np.ndarray
    n_contacts: np.ndarray = field(repr=False)

    @property
    def bin_middles(self) -> np.ndarray:
        """Middle day of each bin, shape (n_bins,)."""
        return 0.5 * (self.bin_edges[:-1] + self.bin_edges[1:])

    @property
    def standardised_difference(self) -> np.ndarray:
        """``(observed - expected) / standard_error``, shape (n_series, n_bins); nan where undefined."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.standard_error > 0, (self.observed - self.expected) / self.standard_error, np.nan)


def _time_bin_edges(times: np.ndarray, time_bins) -> np.ndarray:
    if np.ndim(time_bins) == 0:
        count = int(time_bins)
        if count < 1:
            raise ValueError(f"time_bins must be at least 1, got {time_bins!r}")
        low, high = (float(times.min()), float(times.max())) if times.size else (0.0, 1.0)
        if high <= low:
            high = low + 1.0
        return np.linspace(low, high, count + 1)
    edges = np.asarray(time_bins, dtype=float).reshape(-1)
    if edges.size < 2 or not np.all(np.isfinite(edges)) or np.any(np.diff(edges) <= 0):
        raise ValueError("time_bins must be a count or at least two increasing, finite bin edges (days)")
    return edges


def occupancy_over_calendar_time(model: StageModel, timelines: Timelines, time_bins=12, *, channels=None,
                                 predictions: OneStepPredictions | None = None) -> OccupancyOverTime:
    """Observed versus expected occupancy of each recorded category over calendar time.

    Parameters
    ----------
    model : StageModel
    timelines : Timelines
    time_bins : int or array_like
        Number of equal-width bins between the first and last contact day, or the bin edges (days).
        Contacts outside the edges are left out.
    channels : sequence of int, optional
        Indices of the channels to include (default all).
    predictions : OneStepPredictions, optional
        From :func:`one_step_predictions` on the same inputs.

    Returns
    -------
    OccupancyOverTime
    """
    if predictions is None:
        predictions = one_step_predictions(model, timelines)
    edges = _time_bin_edges(timelines.times, time_bins)
    n_bins = edges.size - 1
    which = np.searchsorted(edges, timelines.times, side="right") - 1
    which[timelines.times == edges[-1]] = n_bins - 1
    inside = (which >= 0) & (which < n_bins) & predictions.usable
    series_channel, categories, observed, expected, error, counts = [], [], [], [], [], []
    for c in (range(len(model.channels)) if channels is None else channels):
        spec = model.channels[c]
        codes = timelines.observations[:, c]
        rows = np.flatnonzero(inside & (codes >= 0))
        bins = which[rows]
        n = np.bincount(bins, minlength=n_bins)
        probabilities = predictions.category_probabilities(model, c, rows)
        for k, name in enumerate(spec.categories):
            p = probabilities[:, k]
            with np.errstate(invalid="ignore", divide="ignore"):
                observed.append(np.bincount(bins, weights=(codes[rows] == k).astype(float), minlength=n_bins) / n)
                expected.append(np.bincount(bins, weights=p, minlength=n_bins) / n)
                error.append(np.sqrt(np.bincount(bins, weights=p * (1 - p), minlength=n_bins)) / n)
            counts.append(n)
            series_channel.append(spec.name)
            categories.append(str(name))
    shape = (len(series_channel), n_bins)
    as_array = lambda values, dtype=float: np.array(values, dtype=dtype).reshape(shape)  # noqa: E731
    return OccupancyOverTime(edges, series_channel, categories, as_array(observed), as_array(expected), as_array(error),
                             as_array(counts, np.int64))
