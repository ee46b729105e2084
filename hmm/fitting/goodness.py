"""Goodness of fit: observed versus expected transitions between consecutive contacts, with a bootstrap p-value.

The stages are hidden, so the check works on what was recorded. For each channel, every pair of
consecutive contacts of a case at which that channel was recorded both times is one "transition"
from the earlier category to the later one. Its expected distribution under the model, given the
case's evidence up to and including the earlier contact ``i``, is

    ``E[to = k] = sum_s filtered_i[s] (P(gap) E_c)[s, k]``

(filtered probabilities from one forward pass, ``P(gap) = expm(Q(x_i) gap)``, emission matrix
``E_c``; restricted to the stages allowed at the later contact - see
:mod:`hmm.fitting.goodness_occupancy`). Pairs are grouped by channel, *from-group* (the category
recorded at the earlier contact, or the most likely stage there given the evidence up to it),
gap-length band (quantiles of the observed gaps) and covariate pattern at the earlier contact;
within each group the observed and expected counts of every to-category are compared. This is the
observed-versus-expected table of Kalbfleisch & Lawless (1985, JASA 80, p. 868) for panel data,
with hidden stages replaced by recorded categories and one-step-ahead predictions. Expected counts
of a group sum to its number of pairs.

The Pearson-type statistic ``T = sum (O - E)^2 / E`` over cells with ``E > 0`` (Aguirre-Hernandez &
Farewell 2002, Statistics in Medicine 21, 1345-1363) is not chi-squared distributed here (sparse
cells, dependent pairs, estimated parameters, no fixed grouping), so its p-value comes from a
parametric bootstrap: caseloads are simulated from the model at the same contact times with the
same covariates, the same pattern of unrecorded values and the same contacts with a recorded
stage (:func:`hmm.simulate.simulate_caseload`), ``T`` is recomputed on each with the same cell
layout, and ``p = (1 + #{T_b >= T}) / (B + 1)``. With ``refit=False`` (default) the replicates are
scored with the model as given, which ignores estimation error; because the model was fitted to
the observed data and not to the replicates, that p-value tends to be too large (conservative).
``refit=True`` refits every replicate from the model as start (one start each; much slower).

With the model's ``unscheduled_contacts`` block the replicates keep the scheduled dates only and
draw the unscheduled contacts from the model's stage-dependent rates (each case up to its last
recorded contact), so dates and values stay linked as in the data; without the block, replicates
at the observed dates sever that link and the p-value loses power when contact timing is informative.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..inference import forward
from ..model import StageModel
from ..random_state import random_generator
from ..simulate import simulate_caseload
from ..timelines import MISSING, Timelines
from .goodness_occupancy import occupancy_over_calendar_time, one_step_predictions
from .goodness_result import GoodnessOfFit

__all__ = ["GoodnessOfFit", "goodness_of_fit", "SMALL_EXPECTED"]

#: Cells with an expected count below this are reported in the warnings.
SMALL_EXPECTED = 5.0


@dataclass(frozen=True)
class _Layout:
    """How pairs are put into cells; fixed from the observed data and reused for every replicate."""

    channels: tuple          # channel indices checked
    group_by: str            # "category" or "stage"
    from_labels: list        # per checked channel: labels of its from-groups
    to_labels: list          # per checked channel: category labels
    gap_inner_edges: np.ndarray
    gap_labels: list
    covariate_columns: list  # per covariate column: (kind, values or threshold)
    covariate_keys: np.ndarray    # sorted distinct covariate keys
    covariate_labels: list

    @property
    def shape(self) -> tuple:
        n_from = max(len(labels) for labels in self.from_labels)
        n_to = max(len(labels) for labels in self.to_labels)
        return len(self.channels), n_from, len(self.gap_labels), len(self.covariate_labels), n_to

    def covariate_group(self, covariates: np.ndarray) -> np.ndarray:
        if not self.covariate_columns:
            return np.zeros(covariates.shape[0], dtype=np.int64)
        index = np.searchsorted(self.covariate_keys, _covariate_key(covariates, self.covariate_columns))
        return np.minimum(index, self.covariate_keys.size - 1)


def _covariate_key(covariates: np.ndarray, columns: list) -> np.ndarray:
    key = np.zeros(covariates.shape[0], dtype=np.int64)
    for column, (kind, values) in enumerate(columns):
        if kind == "values":
            code, size = np.searchsorted(values, covariates[:, column]), values.size
        else:
            code, size = (covariates[:, column] > values).astype(np.int64), 2
        key = key * size + code
    return key


def _covariate_layout(model: StageModel, covariates: np.ndarray, max_groups: int, warnings: list):
    """Per column: keep up to two distinct values, otherwise split at the median; then the patterns seen."""
    if not model.n_covariates or covariates.shape[0] == 0 or max_groups <= 1:
        return [], np.zeros(1, dtype=np.int64), ["all"]
    columns, parts = [], []
    for column, name in enumerate(model.covariates):
        values = np.unique(covariates[:, column])
        if values.size <= 2:
            columns.append(("values", values))
            parts.append([f"{name}={v:g}" for v in values])
        else:
            middle = float(np.median(covariates[:, column]))
            columns.append(("threshold", middle))
            parts.append([f"{name}<={middle:g}", f"{name}>{middle:g}"])
    keys = np.unique(_covariate_key(covariates, columns))
    if keys.size > max_groups:
        warnings.append(f"{keys.size} covariate patterns is more than max_covariate_groups={max_groups}; "
                        "pairs are not grouped by covariates")
        return [], np.zeros(1, dtype=np.int64), ["all"]
    labels = []
    for key in keys:
        codes = []
        for column_parts in reversed(parts):
            key, code = divmod(int(key), len(column_parts))
            codes.append(column_parts[code])
        labels.append(", ".join(reversed(codes)))
    return columns, keys, labels


def _gap_layout(gaps: np.ndarray, bands: int, warnings: list):
    if bands < 1:
        raise ValueError(f"gap_bands must be at least 1, got {bands}")
    inner = np.unique(np.quantile(gaps, np.linspace(0, 1, bands + 1)[1:-1])) if bands > 1 else np.zeros(0)
    inner = inner[inner < gaps.max()]
    if inner.size + 1 < bands:
        warnings.append(f"only {inner.size + 1} gap-length band(s) instead of {bands}: many gaps have the same length")
    if inner.size == 0:
        return inner, ["any gap"]
    labels = [f"up to {inner[0]:g} days"]
    labels += [f"over {a:g} to {b:g} days" for a, b in zip(inner[:-1], inner[1:])]
    labels.append(f"over {inner[-1]:g} days")
    return inner, labels


def _pairs(timelines: Timelines, usable: np.ndarray, channel: int) -> np.ndarray:
    """Rows ``j`` (later contact) of consecutive pairs with ``channel`` recorded at ``j - 1`` and ``j``."""
    codes = timelines.observations[:, channel]
    later = np.ones(timelines.n_contacts, dtype=bool)
    later[timelines.first_index] = False
    rows = np.flatnonzero(later & usable & (codes >= 0))
    return rows[(codes[rows - 1] >= 0) & usable[rows - 1]]


def _tabulate(model: StageModel, timelines: Timelines, layout: _Layout, predictions=None):
    """Observed and expected counts in every cell, shape ``layout.shape``, and contacts left out."""
    if predictions is None:
        predictions = one_step_predictions(model, timelines, forward(model, timelines))
    observed, expected = np.zeros(layout.shape), np.zeros(layout.shape)
    flat_size = int(np.prod(layout.shape[1:]))
    for position, channel in enumerate(layout.channels):
        rows = _pairs(timelines, predictions.usable, channel)
        codes = timelines.observations[:, channel].astype(np.int64)
        if layout.group_by == "stage":
            from_group = predictions.filtered[rows - 1].argmax(axis=1)
        else:
            from_group = codes[rows - 1]
        band = np.searchsorted(layout.gap_inner_edges, timelines.times[rows] - timelines.times[rows - 1], side="left")
        group = layout.covariate_group(timelines.covariates[rows - 1])
        _, n_from, n_bands, n_groups, n_to = layout.shape
        row_cell = ((from_group * n_bands + band) * n_groups + group) * n_to
        probabilities = predictions.category_probabilities(model, channel, rows)
        k = probabilities.shape[1]
        observed[position] = np.bincount(row_cell + codes[rows], minlength=flat_size).reshape(layout.shape[1:])
        cells = (row_cell[:, None] + np.arange(k)[None, :]).reshape(-1)
        expected[position] = np.bincount(cells, weights=probabilities.reshape(-1),
                                         minlength=flat_size).reshape(layout.shape[1:])
    return observed, expected, predictions.n_impossible


def _pearson(observed: np.ndarray, expected: np.ndarray) -> float:
    used = expected > 0
    return float(np.sum((observed[used] - expected[used]) ** 2 / expected[used]))


def _channel_indices(model: StageModel, channel) -> tuple:
    if not model.channels:
        raise ValueError("the model has no observation channels to check")
    if channel is None:
        return tuple(range(len(model.channels)))
    names = [c.name for c in model.channels]
    if isinstance(channel, str):
        if channel not in names:
            raise ValueError(f"no channel {channel!r}; the model has {', '.join(names)}")
        return (names.index(channel),)
    if not 0 <= int(channel) < len(names):
        raise ValueError(f"channel index {channel} out of range 0..{len(names) - 1}")
    return (int(channel),)


def _schedule(model: StageModel, timelines: Timelines) -> dict:
    """Contact times, covariates and recording pattern of the ordinary contacts, for simulation.

    With ``model.unscheduled_contacts`` only the scheduled contacts (and each case's first contact,
    which is conditioned on) are kept as the schedule; unscheduled contacts are simulated from the
    model's rates up to each case's last contact, and their values go missing at the rate observed
    at unscheduled contacts (per channel).
    """
    exact = np.zeros(model.n_stages, dtype=bool)
    for name in model.exact_entry_stages:
        exact[model.stage_index(name)] = True
    ordinary = (timelines.allowed_stages & ~exact).any(axis=1)
    kept = timelines.subset(np.flatnonzero(np.add.reduceat(ordinary.astype(np.int64), timelines.offsets[:-1]) > 0)) \
        if timelines.n_contacts else timelines
    ordinary = (kept.allowed_stages & ~exact).any(axis=1)
    timing = model.unscheduled_contacts is not None
    extra = {}
    if timing:
        first = np.zeros(kept.n_contacts, dtype=bool)
        first[kept.first_index] = True
        unscheduled = ordinary & kept.unscheduled_mask & ~first
        ordinary &= ~unscheduled
        seen = kept.observations[unscheduled] >= 0
        extra = dict(end_times=kept.times[kept.last_index],
                     unscheduled_missing=1.0 - seen.mean(axis=0) if seen.shape[0] else
                     np.zeros(kept.observations.shape[1]))
    rows = np.flatnonzero(ordinary)
    counts = np.bincount(kept.case_of_contact[rows], minlength=kept.n_cases)
    times = np.split(kept.times[rows], np.cumsum(counts)[:-1])
    return dict(times=times, offsets=np.concatenate([[0], np.cumsum(counts)]), covariates=kept.covariates[rows],
                missing=kept.observations[rows] < 0, known=~kept.allowed_stages[rows].all(axis=1), **extra)


def _replicate(model: StageModel, schedule: dict, rng: np.random.Generator) -> Timelines:
    """A caseload simulated from ``model`` with the observed contact schedule and recording pattern."""
    timing = "end_times" in schedule
    sim = simulate_caseload(model, schedule["times"], schedule["covariates"], rng, exact_entry=True,
                            end_times=schedule["end_times"] if timing else None)
    t = sim.timelines
    ordinary = np.flatnonzero(~sim.exact_entry_contact & ~t.unscheduled_mask)
    case = sim.case_of_contact[ordinary]
    position = np.arange(ordinary.size) - np.searchsorted(case, case, side="left")
    scheduled = schedule["offsets"][case] + position
    observations = t.observations.copy()
    observations[ordinary] = np.where(schedule["missing"][scheduled], MISSING, observations[ordinary])
    if timing:
        extra = np.flatnonzero(t.unscheduled_mask)
        lost = rng.random((extra.size, observations.shape[1])) < schedule["unscheduled_missing"][None, :]
        observations[extra] = np.where(lost, MISSING, observations[extra])
    allowed = t.allowed_stages.copy()
    known = ordinary[schedule["known"][scheduled]]
    allowed[known] = False
    allowed[known, sim.true_stages[known]] = True  # a recorded stage is recorded as the true one
    return Timelines(t.offsets, t.times, observations, allowed, t.covariates, t.unscheduled)


def goodness_of_fit(model: StageModel, timelines: Timelines, *, channel=None, group_by: str = "category",
                    gap_bands: int = 3, covariate_groups: bool = True, max_covariate_groups: int = 8,
                    bootstrap: int = 99, refit: bool = False, rng: np.random.Generator | None = None,
                    time_bins=12, callback=None) -> GoodnessOfFit:
    """Observed versus expected transitions between consecutive contacts, and occupancy over time.

    Parameters
    ----------
    model : StageModel
        Usually the model fitted to ``timelines``.
    timelines : Timelines
    channel : str or int, optional
        Check only this channel (default: every channel, one statistic summed over them).
    group_by : {"category", "stage"}
        From-group of a pair: the category recorded at the earlier contact, or the most likely
        stage there given the evidence up to it.
    gap_bands : int
        Number of gap-length bands (quantiles of the observed gaps; fewer when gaps tie).
    covariate_groups : bool
        Group pairs by covariate pattern at the earlier contact (a covariate with more than two
        values is split at its median).
    max_covariate_groups : int
        More covariate patterns than this and pairs are not grouped by covariates (with a warning).
    bootstrap : int
        Number of simulated caseloads for the p-value (0 = none).
    refit : bool
        Refit each replicate (one start from ``model``) before computing its statistic.
    rng : numpy.random.Generator, int or None
        For the simulations (:func:`hmm.random_state.random_generator`; None: fresh entropy, so pass
        a seed for a repeatable p-value).
    time_bins : int or array_like
        Calendar-time bins for the occupancy check (:func:`occupancy_over_calendar_time`).
    callback : callable(fraction), optional
        Progress in [0, 1]; raising from it cancels (the exception propagates).

    Returns
    -------
    GoodnessOfFit
    """
    if group_by not in ("category", "stage"):
        raise ValueError(f"group_by must be 'category' or 'stage', got {group_by!r}")
    if int(bootstrap) < 0:
        raise ValueError(f"bootstrap must be 0 or more replicates, got {bootstrap}")
    channels = _channel_indices(model, channel)
    rng = random_generator(rng)
    warnings = []
    predictions = one_step_predictions(model, timelines)
    layout, n_pairs = _cell_layout(model, timelines, predictions, channels, group_by, int(gap_bands),
                                   max_covariate_groups if covariate_groups else 0, warnings)
    observed, expected, impossible = _tabulate(model, timelines, layout, predictions)
    if impossible:
        warnings.append(f"{impossible} contact(s) left out: the model gives their earlier evidence probability zero")
    statistic = _pearson(observed, expected)
    replicates, p_value = _bootstrap(model, timelines, layout, statistic, int(bootstrap), refit, rng, callback,
                                     warnings)
    entries, obs, exp = _long_table(model, layout, observed, expected, warnings)
    occupancy = occupancy_over_calendar_time(model, timelines, time_bins, channels=channels,
                                             predictions=predictions)
    if callback is not None:
        callback(1.0)
    return GoodnessOfFit(**entries, observed=obs, expected=exp, statistic=statistic, p_value=float(p_value),
                         bootstrap_statistics=replicates, refit=bool(refit), group_by=group_by,
                         n_pairs=n_pairs, gap_band_edges=layout.gap_inner_edges, warnings=tuple(warnings),
                         occupancy=occupancy)


def _cell_layout(model: StageModel, timelines: Timelines, predictions, channels, group_by: str, gap_bands: int,
                 max_covariate_groups: int, warnings: list) -> tuple:
    """The cells pairs fall into, fixed from the observed data: ``(_Layout, number of pairs)``."""
    pairs = {c: _pairs(timelines, predictions.usable, c) for c in channels}
    later = np.concatenate(list(pairs.values()))
    if later.size == 0:
        names = ", ".join(model.channels[c].name for c in channels)
        raise ValueError(f"no two consecutive contacts of a case both record {names}; nothing to compare")
    gap_edges, gap_labels = _gap_layout(timelines.times[later] - timelines.times[later - 1], gap_bands, warnings)
    columns, keys, covariate_labels = _covariate_layout(model, timelines.covariates, max_covariate_groups, warnings)
    to_labels = [[str(k) for k in model.channels[c].categories] for c in channels]
    from_labels = [list(model.stages) if group_by == "stage" else labels for labels in to_labels]
    layout = _Layout(channels, group_by, from_labels, to_labels, gap_edges, gap_labels, columns, keys,
                     covariate_labels)
    return layout, int(later.size)


def _bootstrap(model: StageModel, timelines: Timelines, layout: _Layout, statistic: float, bootstrap: int,
               refit: bool, rng: np.random.Generator, callback, warnings: list) -> tuple:
    """Parametric bootstrap: the statistic of ``bootstrap`` caseloads simulated from ``model`` at the
    observed contact times (refitted first with ``refit``); ``(replicate statistics (B,), p-value)``."""
    replicates = np.zeros(bootstrap)
    if bootstrap:
        schedule = _schedule(model, timelines)
        not_converged = 0
        for b in range(bootstrap):
            sample = _replicate(model, schedule, rng)
            scoring_model = model
            if refit:
                from .optimise import fit_model

                def within(fraction, _b=b):
                    if callback is not None:
                        callback((_b + 0.95 * fraction) / bootstrap)

                fitted = fit_model(model, sample, starts=1, rng=rng, callback=within, standard_errors=False)
                scoring_model, not_converged = fitted.model, not_converged + (not fitted.converged)
            replicates[b] = _pearson(*_tabulate(scoring_model, sample, layout)[:2])
            if callback is not None:
                callback((b + 1) / bootstrap)
        if not_converged:
            warnings.append(f"{not_converged} of {bootstrap} refitted replicates did not converge")
    p_value = (1 + np.count_nonzero(replicates >= statistic - 1e-9 * max(1.0, statistic))) / (bootstrap + 1) \
        if bootstrap else float("nan")
    if bootstrap and not refit:
        warnings.append("the bootstrap did not re-estimate the parameters (refit=False); the p-value is "
                        "conservative (tends to be too large)")
    return replicates, p_value


def _long_table(model: StageModel, layout: _Layout, observed: np.ndarray, expected: np.ndarray,
                warnings: list) -> tuple:
    """The cells that hold at least one pair, in layout order, as long-form columns:
    ``(labels by column name, observed (m,), expected (m,))``."""
    group_total = observed.sum(axis=-1)
    entries = {name: [] for name in ("channel", "from_group", "gap_band", "covariate_group", "to_category")}
    obs, exp = [], []
    for index in zip(*np.nonzero(group_total > 0)):
        position, source, band, group = (int(i) for i in index)
        n_to = len(layout.to_labels[position])
        for k in range(n_to):
            entries["channel"].append(model.channels[layout.channels[position]].name)
            entries["from_group"].append(layout.from_labels[position][source])
            entries["gap_band"].append(layout.gap_labels[band])
            entries["covariate_group"].append(layout.covariate_labels[group])
            entries["to_category"].append(layout.to_labels[position][k])
        obs.append(observed[index][:n_to])
        exp.append(expected[index][:n_to])
    obs, exp = np.concatenate(obs), np.concatenate(exp)
    small = int(np.count_nonzero(exp < SMALL_EXPECTED))
    if small:
        warnings.append(f"{small} of {exp.size} cells have an expected count below {SMALL_EXPECTED:g}; the bootstrap "
                        "p-value allows for that, but such cells make the statistic noisy (fewer gap bands or one "
                        "channel at a time give fuller cells)")
    zero = int(np.count_nonzero((exp <= 0) & (obs > 0)))
    if zero:
        warnings.append(f"{zero} cell(s) hold pairs the model calls impossible (expected 0); they are left out of "
                        "the statistic")
    return entries, obs, exp
