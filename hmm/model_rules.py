"""The rules a stage model's values must follow, each worded once.

Every reader of a stage model asks these functions, so a rule and its message live in one place:
:meth:`hmm.StageModel.validate` (the engine; it names the field as the model file does, for example
``transitions[2]``), :func:`caseview.modelfile.model_from_dict` (the same rules met while reading, so
the message carries the exact JSON path) and the staff-estimates builder
(:mod:`hmm.fitting.staff_estimates`, for the names it shares). Each function returns None when the
rule holds and otherwise the message (without the location, which the caller knows). The limit on
``rate * exp(beta . x)`` is :func:`hmm.model.rate_limit_problem`.
"""

from __future__ import annotations

import numpy as np

__all__ = ["SUM_TOLERANCE", "stage_count_problem", "first_duplicate", "sum_to_one_problem",
           "self_transition_problem", "exact_entry_problem", "name_clash_problem"]

#: How far a set of probabilities may be from summing to 1.
SUM_TOLERANCE = 1e-6   # (written "1e-6" in the messages)


def stage_count_problem(n_stages: int) -> str | None:
    return "a model needs at least two stages" if n_stages < 2 else None


def first_duplicate(names) -> tuple | None:
    """``(position, message)`` of the first name listed a second time, or None."""
    seen = set()
    for i, name in enumerate(names):
        if name in seen:
            return i, f"duplicate name {name!r}"
        seen.add(name)
    return None


def sum_to_one_problem(probabilities, what: str = "probabilities") -> str | None:
    """Probabilities that are not all >= 0 or do not sum to 1 within :data:`SUM_TOLERANCE`."""
    values = np.asarray(probabilities, dtype=float)
    if np.any(values < 0):
        return f"{what} must be >= 0, got {values.min():.8g}"
    total = float(values.sum())
    if abs(total - 1.0) > SUM_TOLERANCE:
        return f"{what} must sum to 1 within 1e-6, they sum to {total:.8g}"
    return None


def self_transition_problem(source: str, target: str) -> str | None:
    return f"a transition from {source} to itself is not allowed" if source == target else None


def exact_entry_problem(stage: str, has_way_out: bool) -> str | None:
    """Exact entry dates are recorded only for a stage people never leave (an absorbing stage)."""
    return f"exact entry is only for stages people never leave; {stage!r} has a way out" if has_way_out else None


def name_clash_problem(channel_names, covariate_names, channel_word: str = "channel") -> str | None:
    clash = set(channel_names) & set(covariate_names)
    if clash:
        return f"name used for both a {channel_word} and a covariate: {', '.join(sorted(clash))}"
    return None
