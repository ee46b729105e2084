"""Helpers for engine tests: build small stage models straight from matrices (imported by the tests)."""

from __future__ import annotations

import numpy as np
from hmm import Channel, StageModel, Timelines, Transition


def model_from_matrices(generator, initial, emissions=(), exact_entry=(), effects=None, covariates=()):
    """A StageModel whose baseline generator is ``generator`` (S, S).

    ``emissions`` is a list of (S, C) tables, one per channel; ``effects`` maps (r, s) to a dict of
    log hazard ratios by covariate name.
    """
    q = np.asarray(generator, dtype=float)
    n = q.shape[0]
    stages = tuple(f"stage{r}" for r in range(n))
    effects = effects or {}
    transitions = tuple(
        Transition(r, s, float(q[r, s]), dict(effects.get((r, s), {})))
        for r in range(n) for s in range(n) if r != s and q[r, s] > 0
    )
    channels = tuple(
        Channel(f"channel{c}", tuple(f"cat{j}" for j in range(np.shape(e)[1])), np.asarray(e, dtype=float))
        for c, e in enumerate(emissions)
    )
    return StageModel(stages=stages, initial=np.asarray(initial, dtype=float), transitions=transitions,
                      channels=channels, covariates=tuple(covariates),
                      exact_entry_stages=tuple(stages[s] for s in exact_entry))


def random_generator(rng, n_stages, low=0.01, high=0.5, density=1.0):
    """A random generator with off-diagonal rates uniform in [low, high] (some zero if density < 1)."""
    q = rng.uniform(low, high, size=(n_stages, n_stages))
    q *= rng.random((n_stages, n_stages)) < density
    np.fill_diagonal(q, 0.0)
    np.fill_diagonal(q, -q.sum(axis=1))
    return q


def random_emissions(rng, n_stages, n_categories):
    table = rng.dirichlet(np.ones(n_categories) * 0.7, size=n_stages)
    return table


def timelines_from_lists(times, observations, allowed=None, covariates=None, n_stages=None):
    """Timelines from per-case lists: times[i] (n_i,), observations[i] (n_i, C)."""
    case = np.concatenate([np.full(len(t), i) for i, t in enumerate(times)])
    flat_times = np.concatenate([np.asarray(t, float) for t in times])
    flat_obs = np.concatenate([np.asarray(o).reshape(len(t), -1) for o, t in zip(observations, times)])
    n = flat_times.size
    if allowed is None:
        allowed = np.ones((n, n_stages), dtype=bool)
    if covariates is None:
        covariates = np.zeros((n, 0))
    return Timelines.from_contacts(case, flat_times, flat_obs, allowed, covariates)
