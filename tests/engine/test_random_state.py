"""The one helper that turns a seed, None or a Generator into a numpy Generator (hmm.random_state)."""

import numpy as np
import pytest

from hmm.random_state import random_generator


def test_a_generator_is_used_as_given():
    rng = np.random.default_rng(5)
    assert random_generator(rng) is rng


def test_the_same_seed_gives_the_same_stream():
    first, second = random_generator(7), random_generator(7)
    assert np.array_equal(first.integers(0, 1_000_000, 20), second.integers(0, 1_000_000, 20))
    # numpy's documented meaning of an int seed: default_rng(seed) (numpy.random.default_rng docs)
    assert np.array_equal(random_generator(7).random(5), np.random.default_rng(7).random(5))


def test_a_seed_sequence_is_accepted():
    sequence = np.random.SeedSequence(11)
    assert np.array_equal(random_generator(sequence).random(3), np.random.default_rng(11).random(3))


def test_none_draws_fresh_entropy_never_a_fixed_seed():
    # None is "no seed": two calls give different streams (a silent default_rng(0) would repeat)
    draws = {tuple(random_generator(None).integers(0, 2**62, 4)) for _ in range(3)}
    assert len(draws) == 3


@pytest.mark.parametrize("bad", [1.5, "3", True, -1, [1, 2, object()]])
def test_anything_else_is_refused_with_what_was_given(bad):
    with pytest.raises((TypeError, ValueError), match="seed"):
        random_generator(bad)


def test_the_engine_has_no_silent_fixed_seed():
    """No module of the engine or the product falls back to a fixed seed when none is given."""
    import pathlib
    import re

    root = pathlib.Path(__file__).resolve().parents[2]
    pattern = re.compile(r"default_rng\(0\)\s+if\s+\w+\s+is\s+None")
    offenders = [str(path.relative_to(root)) for folder in ("hmm", "caseview")
                 for path in (root / folder).rglob("*.py") if pattern.search(path.read_text(encoding="utf-8"))]
    assert offenders == []
