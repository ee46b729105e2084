"""Transition probability matrices ``P(t) = expm(Q t)`` for many generators and gaps at once.

The work is done once per *distinct* (generator, gap) pair. Each generator gets one
eigendecomposition ``Q = V diag(lambda) V^-1`` so that every gap costs only
``V diag(exp(lambda t)) V^-1`` (the eigen fast path). That is unreliable when ``V`` is badly
conditioned or when eigenvalues (nearly) coincide - for example a progressive chain with equal
rates, whose generator is defective - so such generators fall back to ``scipy.linalg.expm``
(Al-Mohy-Higham scaling and squaring), applied to the stacked ``Q t`` of all their gaps.

Results are cleaned: real part, tiny negative entries clipped to zero, rows renormalised to sum
to one; a gap of zero gives the identity exactly.

:func:`covariate_groups` finds the distinct covariate rows of a caseload, so that each generator
is built (and decomposed) once per distinct row.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "transition_matrix",
    "transition_matrices",
    "distinct_transition_matrices",
    "eigen_path_is_safe",
    "factorise",
    "covariate_groups",
    "EIGEN_CONDITION_LIMIT",
    "EIGEN_SEPARATION_TOLERANCE",
]

#: Largest condition number of the eigenvector matrix accepted on the eigen fast path.
EIGEN_CONDITION_LIMIT = 1e6
#: Eigenvalues closer than this (relative to the largest eigenvalue modulus) count as coincident.
EIGEN_SEPARATION_TOLERANCE = 1e-7

_METHODS = ("auto", "eigen", "expm")


def _eigen_safety(generators: np.ndarray) -> tuple:
    """Eigendecompose stacked generators and judge whether the eigen path is safe for each.

    Parameters
    ----------
    generators : ndarray, shape (G, S, S)

    Returns
    -------
    safe : ndarray of bool, shape (G,)
    eigenvalues : ndarray of complex, shape (G, S)
    eigenvectors : ndarray of complex, shape (G, S, S)
    """
    eigenvalues, eigenvectors = np.linalg.eig(generators)
    with np.errstate(all="ignore"):
        condition = np.linalg.cond(eigenvectors)
    scale = np.abs(eigenvalues).max(axis=1)
    separation = np.abs(eigenvalues[:, :, None] - eigenvalues[:, None, :])
    n = generators.shape[1]
    separation[:, np.arange(n), np.arange(n)] = np.inf
    distinct = separation.min(axis=(1, 2)) > EIGEN_SEPARATION_TOLERANCE * np.maximum(scale, 1e-300)
    safe = np.isfinite(condition) & (condition < EIGEN_CONDITION_LIMIT) & distinct
    safe &= np.all(np.isfinite(eigenvalues), axis=1) & (scale > 0)
    return safe, eigenvalues, eigenvectors


def eigen_path_is_safe(generator: np.ndarray) -> bool | np.ndarray:
    """Whether the eigen fast path is trusted for a generator (or a stack of them).

    Parameters
    ----------
    generator : ndarray, shape (S, S) or (G, S, S)

    Returns
    -------
    bool, or ndarray of bool with shape (G,)
        False when the eigenvector matrix is ill-conditioned (condition number at least
        ``EIGEN_CONDITION_LIMIT``), when two eigenvalues (nearly) coincide, or when the
        generator is all zero; those generators use ``scipy.linalg.expm``.
    """
    q = np.asarray(generator, dtype=float)
    safe = _eigen_safety(q if q.ndim == 3 else q[None])[0]
    return bool(safe[0]) if q.ndim == 2 else safe


def _clean(matrices: np.ndarray, renormalise: bool = True) -> np.ndarray:
    """Real part, negatives clipped to zero, rows renormalised (unless not); shape (k, S, S) kept.

    The matrices of a sub-generator (``Q - Lambda``, rows summing to ``-lambda``) are
    sub-stochastic: their rows sum to the probability of no unscheduled contact, so they are only
    clipped, never renormalised.
    """
    p = np.real(matrices)
    p = np.where(p > 0.0, p, 0.0)
    if not renormalise:
        return p
    totals = p.sum(axis=2, keepdims=True)
    return p / np.where(totals > 0, totals, 1.0)


def factorise(values: np.ndarray) -> tuple:
    """Sorted distinct values and the code of each value (a fast ``np.unique(..., return_inverse=True)``).

    Whole numbers in a moderate range (days, category codes, pair keys) are coded with a lookup
    table in linear time; anything else goes through a hash-based ``np.unique`` and a binary search.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Finite numbers.

    Returns
    -------
    distinct : ndarray, shape (m,)
    codes : ndarray of int64, shape (n,)
        ``distinct[codes] == values``.
    """
    values = np.asarray(values).reshape(-1)
    n = values.size
    if n == 0:
        return values.copy(), np.zeros(0, dtype=np.int64)
    if values.dtype.kind in "iu":
        whole = None
        whole_values = values
    else:
        whole = values == np.floor(values)
        whole_values = values if whole.all() else values[whole]
        whole = None if whole_values is values else whole
    if whole_values.size:
        low, high = whole_values.min(), whole_values.max()
        if high - low <= max(4 * n, 1 << 20):
            offset = (whole_values - low).astype(np.int64)
            present = np.zeros(int(high - low) + 1, dtype=bool)
            present[offset] = True
            dense = (np.flatnonzero(present) + low).astype(values.dtype)
            if whole is None:
                lookup = np.cumsum(present, dtype=np.int64) - 1
                return dense, lookup[offset]
            rest = values[~whole]
            distinct = np.sort(np.concatenate([dense, np.unique(rest)]))
            lookup = np.zeros(present.size, dtype=np.int64)
            lookup[present] = np.searchsorted(distinct, dense)
            codes = np.empty(n, dtype=np.int64)
            codes[whole] = lookup[offset]
            codes[~whole] = np.searchsorted(distinct, rest)
            return distinct, codes
    distinct = np.unique(values)  # hash-based in numpy >= 2.3 when no inverse is asked for
    return distinct, np.searchsorted(distinct, values).astype(np.int64, copy=False)


def covariate_groups(covariates: np.ndarray) -> tuple:
    """Distinct covariate rows and the index of each row, so each generator is built once.

    Parameters
    ----------
    covariates : ndarray, shape (n, K)

    Returns
    -------
    distinct : ndarray, shape (g, K)
    index : ndarray of int64, shape (n,)
        ``distinct[index] == covariates``.
    """
    n, n_columns = covariates.shape
    if n_columns == 0 or n == 0:
        return np.zeros((1, n_columns)), np.zeros(n, dtype=np.int64)
    # Factorise column by column (fast 1-D sorts) and combine the codes into one integer key.
    key = np.zeros(n, dtype=np.int64)
    radix = 1
    for c in range(n_columns):
        values, codes = factorise(covariates[:, c])
        radix *= values.size
        if radix >= 2**62:
            distinct, index = np.unique(covariates, axis=0, return_inverse=True)
            return distinct, index.reshape(-1)
        key = key * values.size + codes.reshape(-1)
    keys, index = factorise(key)
    first = np.zeros(keys.size, dtype=np.int64)
    first[index[::-1]] = np.arange(n - 1, -1, -1)  # a row holding each distinct key
    return covariates[first], index


def _distinct_pairs(gaps: np.ndarray, generator_index: np.ndarray) -> tuple:
    """Distinct (generator, gap) pairs and the inverse map, without a Python loop.

    Returns
    -------
    pair_generator : ndarray of int64, shape (m,)
    pair_gap : ndarray, shape (m,)
    inverse : ndarray of int64, shape (n,)
    """
    gap_values, gap_codes = factorise(gaps)
    width = max(gap_values.size, 1)
    pairs, inverse = factorise(generator_index * width + gap_codes)
    return pairs // width, gap_values[pairs % width], inverse


def distinct_transition_matrices(generators, gaps, generator_index, method: str = "auto",
                                 sub_generators: bool = False) -> tuple:
    """Transition matrices for distinct (generator, gap) pairs, with the map back to the input.

    Parameters
    ----------
    generators : ndarray, shape (G, S, S)
        Generator matrices (rows sum to zero, off-diagonal rates per day >= 0), or with
        ``sub_generators`` the sub-generators ``Q - Lambda`` (rows sum to ``-lambda <= 0``).
    gaps : ndarray, shape (n,)
        Elapsed times in days, >= 0.
    generator_index : ndarray of int, shape (n,)
        Which generator applies to each gap.
    method : {"auto", "eigen", "expm"}
        ``"auto"`` uses the eigen fast path where :func:`eigen_path_is_safe` and ``expm``
        elsewhere; ``"eigen"`` insists on the eigen path (ValueError if a generator is unsafe);
        ``"expm"`` always uses ``scipy.linalg.expm``.
    sub_generators : bool
        The results are sub-stochastic (rows are not renormalised to sum to one). The eigen path
        and its conditioning check, and the ``expm`` fallback, apply unchanged: ``Q - Lambda`` is
        decomposed like any other matrix.

    Returns
    -------
    matrices : ndarray, shape (m, S, S)
        ``expm(Q_g t)`` for each distinct pair.
    index : ndarray of int64, shape (n,)
        ``matrices[index[i]]`` is the matrix for input ``i``.
    """
    if method not in _METHODS:
        raise ValueError(f"method must be one of {', '.join(_METHODS)}, got {method!r}")
    generators = np.asarray(generators, dtype=float)
    if generators.ndim != 3 or generators.shape[1] != generators.shape[2]:
        raise ValueError(f"generators must have shape (G, S, S), got {generators.shape}")
    gaps = np.asarray(gaps, dtype=float).reshape(-1)
    generator_index = np.asarray(generator_index, dtype=np.int64).reshape(-1)
    if gaps.shape != generator_index.shape:
        raise ValueError("gaps and generator_index must have the same length")
    if gaps.size and (not np.all(np.isfinite(gaps)) or gaps.min() < 0):
        raise ValueError("gaps must be finite numbers of days >= 0")
    if generator_index.size and (generator_index.min() < 0 or generator_index.max() >= generators.shape[0]):
        raise ValueError("generator_index refers to a generator that does not exist")
    if not np.all(np.isfinite(generators)):
        raise ValueError("generator matrices must be finite")
    n_stages = generators.shape[1]
    pair_generator, pair_gap, inverse = _distinct_pairs(gaps, generator_index)
    result = np.empty((pair_gap.size, n_stages, n_stages))
    zero = pair_gap == 0
    result[zero] = np.eye(n_stages)
    todo = np.flatnonzero(~zero)
    if todo.size:
        used = np.unique(pair_generator[todo])
        use_eigen = np.zeros(generators.shape[0], dtype=bool)
        if method != "expm":
            safe, eigenvalues, eigenvectors = _eigen_safety(generators[used])
            if method == "eigen" and not safe.all():
                raise ValueError("the eigen path is not safe for generator(s) "
                                 f"{used[~safe].tolist()} (defective or ill-conditioned)")
            use_eigen[used[safe]] = True
            if safe.any():
                position = np.full(generators.shape[0], -1)
                position[used[safe]] = np.arange(int(safe.sum()))
                values = eigenvalues[safe]
                # A generator's eigenvalues have real part <= 0; clip rounding so exp never overflows.
                values = np.where(values.real > 0, 1j * values.imag, values)
                vectors = eigenvectors[safe]
                inverse_vectors = np.linalg.inv(vectors)
                rows = todo[use_eigen[pair_generator[todo]]]
                where = position[pair_generator[rows]]
                growth = np.exp(values[where] * pair_gap[rows, None])
                result[rows] = _clean(np.einsum("pij,pj,pjk->pik", vectors[where], growth,
                                                inverse_vectors[where]), not sub_generators)
        rows = todo[~use_eigen[pair_generator[todo]]]
        if rows.size:
            stacked = generators[pair_generator[rows]] * pair_gap[rows, None, None]
            import scipy.linalg  # only here: importing it costs ~0.2 s of every command's start-up

            result[rows] = _clean(scipy.linalg.expm(stacked), not sub_generators)
    return result, inverse


def transition_matrices(generators, gaps, generator_index, method: str = "auto",
                        sub_generators: bool = False) -> np.ndarray:
    """Transition matrices ``expm(Q_g t)`` for many gaps, each with its own generator.

    Parameters
    ----------
    generators : ndarray, shape (G, S, S)
    gaps : ndarray, shape (n,)
        Days, >= 0 (0 gives the identity exactly).
    generator_index : ndarray of int, shape (n,)
    method : {"auto", "eigen", "expm"}
        See :func:`distinct_transition_matrices`.
    sub_generators : bool
        ``generators`` are ``Q - Lambda``; the results are sub-stochastic (not renormalised).

    Returns
    -------
    ndarray, shape (n, S, S)
        Row-stochastic matrices; entry ``[i, r, s]`` is P(stage s after ``gaps[i]`` | stage r)
        (with ``sub_generators``: and no unscheduled contact meanwhile).
    """
    matrices, index = distinct_transition_matrices(generators, gaps, generator_index, method, sub_generators)
    return matrices[index]


def transition_matrix(generator, t: float, method: str = "auto") -> np.ndarray:
    """``P(t) = expm(Q t)`` for one generator.

    Parameters
    ----------
    generator : ndarray, shape (S, S)
    t : float
        Days, >= 0.
    method : {"auto", "eigen", "expm"}

    Returns
    -------
    ndarray, shape (S, S)
    """
    q = np.asarray(generator, dtype=float)
    return transition_matrices(q[None], np.array([float(t)]), np.zeros(1, dtype=np.int64), method)[0]
