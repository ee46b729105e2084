"""``expm(Q t)`` and the adjoint of its Frechet derivative, for many (generator, gap) pairs.

The gradient of a log-likelihood ``l(P)`` with ``P = expm(A)``, ``A = Q t``, is
``dl/dA = L(A^T, W)`` where ``W = dl/dP`` and ``L(X, E)`` is the Frechet derivative of the matrix
exponential at ``X`` in direction ``E`` (Najfeld & Havel 1995; Al-Mohy & Higham 2009).

* Eigen path (Kalbfleisch & Lawless 1985, eq. for dP/dtheta): with ``Q = V diag(lambda) V^-1``
  and ``mu = lambda t``, ``L(A^T, W) = V^-T [(V^T W V^-T) o Phi] V^T`` where
  ``Phi_ij = (e^mu_i - e^mu_j) / (mu_i - mu_j)`` (``e^mu_i`` when equal). One eigendecomposition
  per generator serves every gap.
* Fallback (ill-conditioned eigenvectors or nearly coincident eigenvalues, e.g. the defective
  generator of a progressive chain with equal rates): ``scipy.linalg.expm`` for ``P`` and the
  Van Loan (1978) block matrix ``expm([[X, E], [0, X]])``, whose upper-right block is ``L(X, E)``,
  batched over all pairs of those generators.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

__all__ = ["EigenCache", "decompose", "transition_and_adjoint"]

CONDITION_LIMIT = 1e6
SEPARATION_TOLERANCE = 1e-6


class EigenCache:
    """Eigendecompositions of stacked generators with a per-generator 'eigen path is safe' flag.

    Attributes
    ----------
    safe : ndarray of bool, shape (G,)
    values : ndarray of complex, shape (G, S)
    vectors, inverse : ndarray of complex, shape (G, S, S)
    """

    def __init__(self, generators: np.ndarray, method: str = "auto"):
        g, s, _ = generators.shape
        self.generators = generators
        self.safe = np.zeros(g, dtype=bool)
        self.values = np.zeros((g, s), complex)
        self.vectors = np.tile(np.eye(s, dtype=complex), (g, 1, 1))
        self.inverse = self.vectors.copy()
        if method == "expm" or g == 0:
            return
        values, vectors = np.linalg.eig(generators)
        with np.errstate(all="ignore"):
            condition = np.linalg.cond(vectors)
        scale = np.maximum(np.abs(values).max(axis=1), 1e-300)
        gap = np.abs(values[:, :, None] - values[:, None, :])
        gap[:, np.arange(s), np.arange(s)] = np.inf
        safe = (np.isfinite(condition) & (condition < CONDITION_LIMIT)
                & (gap.min(axis=(1, 2)) > SEPARATION_TOLERANCE * scale))
        if method == "eigen" and not safe.all():
            raise ValueError("eigen path requested for a generator with an ill-conditioned eigenbasis")
        self.safe = safe
        self.values[safe] = values[safe]
        self.vectors[safe] = vectors[safe]
        self.inverse[safe] = np.linalg.inv(vectors[safe])


def decompose(generators: np.ndarray, method: str = "auto") -> EigenCache:
    """Eigendecompose ``generators`` (shape (G, S, S)); see :class:`EigenCache`."""
    return EigenCache(np.asarray(generators, dtype=float), method)


def _phi(mu: np.ndarray) -> np.ndarray:
    """Divided differences of exp, shape (m, S, S), from exponents ``mu`` shape (m, S)."""
    a, b = mu[:, :, None], mu[:, None, :]
    diff = a - b
    small = np.abs(diff) < 1e-10
    safe_diff = np.where(small, 1.0, diff)
    # (e^a - e^b) / (a - b), factored on the larger exponent so nothing overflows
    a_larger = np.real(diff) > 0
    with np.errstate(over="ignore", invalid="ignore"):
        value = np.where(a_larger, np.exp(a) * (-np.expm1(-safe_diff)) / safe_diff,
                         np.exp(b) * np.expm1(safe_diff) / safe_diff)
    return np.where(small, np.exp(0.5 * (a + b)), value)


def pair_transition_matrices(cache: EigenCache, pair_generator: np.ndarray, pair_gap: np.ndarray) -> np.ndarray:
    """``expm(Q_g t)`` for each pair, shape (m, S, S) (not clipped, so derivatives stay exact)."""
    m, s = pair_gap.size, cache.generators.shape[1]
    out = np.empty((m, s, s))
    on_eigen = cache.safe[pair_generator]
    e = np.flatnonzero(on_eigen)
    if e.size:
        g = pair_generator[e]
        scaled = cache.vectors[g] * np.exp(cache.values[g] * pair_gap[e, None])[:, None, :]
        out[e] = np.real(scaled @ cache.inverse[g])
    f = np.flatnonzero(~on_eigen)
    if f.size:
        out[f] = scipy.linalg.expm(cache.generators[pair_generator[f]] * pair_gap[f, None, None])
    return out


def adjoint_derivative(cache: EigenCache, pair_generator: np.ndarray, pair_gap: np.ndarray,
                       weights: np.ndarray) -> np.ndarray:
    """``d l / d Q`` per pair given ``W = d l / d P`` per pair.

    Parameters
    ----------
    cache : EigenCache
    pair_generator : ndarray of int, shape (m,)
    pair_gap : ndarray, shape (m,)
    weights : ndarray, shape (m, S, S)
        ``d l / d P`` for each pair.

    Returns
    -------
    ndarray, shape (m, S, S)
        ``t * L((Q t)^T, W)``, the gradient with respect to the generator.
    """
    m, s = pair_gap.size, cache.generators.shape[1]
    out = np.zeros((m, s, s))
    on_eigen = cache.safe[pair_generator]
    e = np.flatnonzero(on_eigen)
    if e.size:
        g = pair_generator[e]
        v, vi = cache.vectors[g], cache.inverse[g]
        vt, vit = np.swapaxes(v, 1, 2), np.swapaxes(vi, 1, 2)
        inner = (vt @ weights[e] @ vit) * _phi(cache.values[g] * pair_gap[e, None])
        out[e] = np.real(vit @ inner @ vt) * pair_gap[e, None, None]
    f = np.flatnonzero(~on_eigen)
    if f.size:
        a_t = np.swapaxes(cache.generators[pair_generator[f]], 1, 2) * pair_gap[f, None, None]
        block = np.zeros((f.size, 2 * s, 2 * s))
        block[:, :s, :s] = a_t
        block[:, s:, s:] = a_t
        block[:, :s, s:] = weights[f]
        out[f] = scipy.linalg.expm(block)[:, :s, s:] * pair_gap[f, None, None]
    return out


def transition_and_adjoint(generators, pair_generator, pair_gap, weights, method="auto"):
    """Convenience: both :func:`pair_transition_matrices` and :func:`adjoint_derivative`."""
    cache = decompose(generators, method)
    return (pair_transition_matrices(cache, pair_generator, pair_gap),
            adjoint_derivative(cache, pair_generator, pair_gap, weights))
