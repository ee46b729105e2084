"""Randomness: the one place a seed, ``None`` or a ``numpy.random.Generator`` becomes a Generator.

Every function of the engine that draws random numbers takes ``rng`` and passes it through
:func:`random_generator` (the idea of scikit-learn's ``check_random_state``, with numpy's Generator
and without a global state). ``None`` means "no seed": fresh entropy from the operating system, so a
caller that wants a repeatable run passes a seed; there is no hidden fixed default.
"""

from __future__ import annotations

import numbers

import numpy as np

__all__ = ["random_generator"]


def random_generator(seed=None) -> np.random.Generator:
    """A ``numpy.random.Generator`` from a seed, ``None`` or a Generator.

    Parameters
    ----------
    seed : None, int >= 0, numpy.random.SeedSequence or numpy.random.Generator
        ``None``: fresh entropy (a different stream every call); an int or a SeedSequence: the
        stream of ``numpy.random.default_rng(seed)``; a Generator: returned as it is (its state is
        shared with the caller, so draws continue its stream).

    Returns
    -------
    numpy.random.Generator

    Raises
    ------
    TypeError
        ``seed`` is of another kind (a float, a string, a bool ...).
    ValueError
        A negative integer seed.
    """
    if isinstance(seed, np.random.Generator):
        return seed
    if seed is None or isinstance(seed, np.random.SeedSequence):
        return np.random.default_rng(seed)
    if isinstance(seed, numbers.Integral) and not isinstance(seed, (bool, np.bool_)):
        if int(seed) < 0:
            raise ValueError(f"a random seed must be an integer of 0 or more, got {seed}")
        return np.random.default_rng(int(seed))
    raise TypeError(f"a random seed must be None, an integer of 0 or more, a numpy SeedSequence or a "
                    f"numpy Generator, got {type(seed).__name__} {seed!r}")
