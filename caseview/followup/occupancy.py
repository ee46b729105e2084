"""Where a caseload will be, summed over cases: occupancy, its time integrals and the count moments.

For a generator ``Q`` the block-triangular matrix ``B = [[Q, I, 0], [0, 0, I], [0, 0, 0]]`` has
``expm(B t) = [[E(t), F1(t), F2(t)], [0, I, t I], [0, 0, I]]`` with ``E(t) = expm(Q t)``,
``F1(t) = int_0^t E(u) du`` and ``F2(t) = int_0^t F1(u) du`` (Van Loan 1978, *IEEE Trans. Autom.
Control* 23, Theorem 1). From them, for a case starting with stage probabilities ``p``:

* occupancy on day ``t``: ``p E(t)``;
* expected days spent in each stage during ``(a, b]``: ``p (F1(b) - F1(a))``, so the expected
  number of moves into stage ``s`` is ``sum_{r != s} p (F1(b) - F1(a))_r Q[r, s]``;
* for referrals arriving as a Poisson process of rate ``lam`` per day and starting with the
  initial distribution ``alpha``: the number in each stage on day ``t`` is Poisson with mean
  ``lam alpha F1(t)`` (thinning), and the expected days in each stage during ``(a, b]`` are
  ``lam alpha (F2(b) - F2(a))``.

Counts over many cases only need the cases' probabilities through group sums (cases with the
same covariates share ``E``): ``sum p``, ``sum p p^T`` and ``sum p (x) p (x) p`` per group give the
exact sums of ``q``, ``q**2`` and ``q**3`` for every stage and day without a pass over the cases.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from hmm.transition import eigen_path_is_safe


@dataclass(frozen=True)
class OccupancyIntegrals:
    """``E``, ``F1`` and ``F2`` for every generator and day; each ndarray shape (G, T, S, S)."""

    transition: np.ndarray
    first_integral: np.ndarray
    second_integral: np.ndarray


def occupancy_integrals(generators: np.ndarray, days, method: str = "auto") -> OccupancyIntegrals:
    """Transition matrices and their first and second time integrals.

    Generators whose eigendecomposition is trusted (:func:`hmm.transition.eigen_path_is_safe`) use
    ``Q = V diag(lam) V^-1``: ``E = V diag(exp(lam t)) V^-1``, ``F1 = V diag((exp(lam t) - 1) / lam) V^-1``,
    ``F2 = V diag((exp(lam t) - 1 - lam t) / lam**2) V^-1`` (``t`` and ``t**2 / 2`` at ``lam = 0``);
    the others use Van Loan's block matrix with ``scipy.linalg.expm``.

    Parameters
    ----------
    generators : ndarray, shape (G, S, S)
    days : ndarray, shape (T,)
        Days ahead, >= 0.
    method : 'auto', 'eigen' or 'expm'
        'eigen' and 'expm' force one path (tests).
    """
    generators = np.asarray(generators, dtype=float)
    days = np.asarray(days, dtype=float).reshape(-1)
    g, s = generators.shape[0], generators.shape[1]
    if method == "expm":
        eigen = np.zeros(g, dtype=bool)
    elif method == "eigen":
        eigen = np.ones(g, dtype=bool)
    else:
        eigen = np.atleast_1d(eigen_path_is_safe(generators)) if g else np.zeros(0, dtype=bool)
    out = np.empty((3, g, days.size, s, s))
    if eigen.any():
        out[:, eigen] = _eigen_integrals(generators[eigen], days)
    if (~eigen).any():
        out[:, ~eigen] = _van_loan_integrals(generators[~eigen], days)
    return OccupancyIntegrals(np.clip(out[0], 0.0, 1.0), out[1], out[2])


def _eigen_integrals(generators: np.ndarray, days: np.ndarray) -> np.ndarray:
    values, vectors = np.linalg.eig(generators)                     # (G, S), (G, S, S)
    inverse = np.linalg.inv(vectors)
    x = values[:, None, :] * days[None, :, None]                    # (G, T, S) = lam t
    t = days[None, :, None]
    small = np.abs(x) < 1e-4
    safe_values = np.where(np.abs(values) > 0, values, 1.0)[:, None, :]
    growth = np.exp(x)
    first = np.where(small, t * (1 + x / 2 + x * x / 6 + x ** 3 / 24), np.expm1(x) / safe_values)
    second = np.where(small, t * t * (0.5 + x / 6 + x * x / 24 + x ** 3 / 120),
                      (np.expm1(x) - x) / safe_values ** 2)
    stacked = np.stack([growth, first, second])                     # (3, G, T, S)
    return np.real(np.einsum("grs,kgts,gsu->kgtru", vectors, stacked, inverse))


def _van_loan_integrals(generators: np.ndarray, days: np.ndarray) -> np.ndarray:
    from scipy.linalg import expm

    g, s = generators.shape[0], generators.shape[1]
    block = np.zeros((g, 3 * s, 3 * s))
    block[:, :s, :s] = generators
    block[:, :s, s:2 * s] = np.eye(s)
    block[:, s:2 * s, 2 * s:] = np.eye(s)
    stacked = expm(block[:, None] * days[None, :, None, None])     # (G, T, 3S, 3S)
    return np.stack([stacked[..., :s, :s], stacked[..., :s, s:2 * s], stacked[..., :s, 2 * s:]])


@dataclass(frozen=True)
class GroupSums:
    """Cases' stage probabilities summed within covariate groups.

    Attributes
    ----------
    first : ndarray, shape (G, S)
        ``sum_i p_i``.
    second : ndarray, shape (G, S, S)
        ``sum_i p_i p_i^T``.
    third : ndarray, shape (G, S, S, S)
        ``sum_i p_i (x) p_i (x) p_i``.
    """

    first: np.ndarray
    second: np.ndarray
    third: np.ndarray


def group_sums(probabilities: np.ndarray, group: np.ndarray, n_groups: int, block: int = 20_000) -> GroupSums:
    """:class:`GroupSums` of ``probabilities`` (n, S) with ``group`` (n,) in ``range(n_groups)``."""
    n, s = probabilities.shape
    first = np.zeros((n_groups, s))
    second = np.zeros((n_groups, s, s))
    third = np.zeros((n_groups, s, s, s))
    for g in range(n_groups):
        rows = probabilities[group == g]
        first[g] = rows.sum(axis=0)
        for start in range(0, rows.shape[0], block):
            part = rows[start:start + block]
            second[g] += part.T @ part
            third[g] += np.einsum("nr,nt,nu->rtu", part, part, part, optimize=True)
    return GroupSums(first, second, third)


def cell_columns(matrices: np.ndarray, follow_up_mask: np.ndarray) -> np.ndarray:
    """Each stage's column of ``matrices`` (..., S, S) plus the follow-up stages' summed column: (..., S, S+1)."""
    combined = matrices[..., :, follow_up_mask].sum(axis=-1, keepdims=True)
    return np.concatenate([matrices, combined], axis=-1)


def power_sums(sums: GroupSums, columns: np.ndarray) -> tuple:
    """Sums over cases of ``q``, ``q**2``, ``q**3`` for every day and cell.

    Parameters
    ----------
    sums : GroupSums
    columns : ndarray, shape (G, T, S, C)
        From :func:`cell_columns` applied to each group's transition matrices.

    Returns
    -------
    tuple of three ndarray, each shape (T, C)
    """
    s1 = np.einsum("gr,gtrc->tc", sums.first, columns)
    s2 = np.einsum("grv,gtrc,gtvc->tc", sums.second, columns, columns, optimize=True)
    s3 = np.einsum("grvw,gtrc,gtvc,gtwc->tc", sums.third, columns, columns, columns, optimize=True)
    return s1, s2, s3


def expected_entries(start_occupancy_days: np.ndarray, generators: np.ndarray,
                     follow_up_mask: np.ndarray) -> np.ndarray:
    """Expected moves into each stage (and into the follow-up stages from outside them).

    Parameters
    ----------
    start_occupancy_days : ndarray, shape (G, T, S)
        Expected days spent in each stage during each period, summed over a group's cases.
    generators : ndarray, shape (G, S, S)

    Returns
    -------
    ndarray, shape (T, S+1)
        ``sum_g sum_{r != s} days[g, t, r] Q_g[r, s]``; the last column counts moves from a
        stage outside the follow-up stages into one of them.
    """
    off = generators.copy()
    idx = np.arange(off.shape[1])
    off[:, idx, idx] = 0.0
    flows = np.einsum("gtr,grs->tsr", start_occupancy_days, off)       # (T, to, from)
    into = flows.sum(axis=2)
    into_follow_up = flows[:, follow_up_mask][:, :, ~follow_up_mask].sum(axis=(1, 2))
    return np.concatenate([into, into_follow_up[:, None]], axis=1)
