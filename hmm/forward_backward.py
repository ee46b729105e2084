"""The one forward-backward core: the case layout and the scaled recursions over it.

Scoring (:mod:`hmm.inference`) and fitting (:mod:`hmm.fitting.likelihood`) walk the same
*position-major* layout of a caseload's contacts: cases are put in order of decreasing number of
contacts, then come all first contacts, all second contacts, and so on. The cases that have a
``k``-th contact form a prefix of that order, so the contacts at position ``k`` are one slice and
the contacts just before them are the first rows of the slice of position ``k - 1``: each step of
the recursion is one numpy operation over every case that has that step. Rows are processed in
chunks of :data:`CHUNK_ROWS` so the gathered step matrices stay in cache.

The observation model enters only through the per-contact likelihood rows and the step matrices
through a table plus an index (one matrix per distinct (generator, gap) pair); what those mean
(exact entry, unscheduled contacts) is decided by the callers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["CaseLayout", "case_layout", "scaled_forward", "scaled_backward", "CHUNK_ROWS"]

#: Rows per numpy operation inside a position (keeps a chunk's step matrices in cache).
CHUNK_ROWS = 8192


@dataclass
class CaseLayout:
    """Position-major layout of the contacts of some cases.

    Attributes
    ----------
    order : ndarray of int64, shape (n_rows,)
        Timeline row of each position-major row.
    block_sizes : ndarray of int64, shape (max_contacts,)
        Number of cases with more than ``k`` contacts (the size of position ``k``).
    block_starts : ndarray of int64, shape (max_contacts + 1,)
        Position-major row where position ``k`` starts (the last entry is ``n_rows``).
    cases : ndarray of int64, shape (n_cases_in_layout,)
        The cases laid out, in decreasing-length order (case ``cases[i]`` owns row ``i`` of each
        position it reaches).
    """

    order: np.ndarray
    block_sizes: np.ndarray
    block_starts: np.ndarray
    cases: np.ndarray
    _row_positions: np.ndarray | None = field(default=None, repr=False)

    @property
    def n_positions(self) -> int:
        return int(self.block_sizes.size)

    @property
    def n_rows(self) -> int:
        return int(self.order.size)

    def current(self, k: int) -> slice:
        """Rows of position ``k``."""
        return slice(int(self.block_starts[k]), int(self.block_starts[k] + self.block_sizes[k]))

    def previous(self, k: int) -> slice:
        """Rows of position ``k - 1`` of the cases that reach position ``k`` (aligned with ``current(k)``)."""
        return slice(int(self.block_starts[k - 1]), int(self.block_starts[k - 1] + self.block_sizes[k]))

    def previous_rows(self) -> np.ndarray:
        """ndarray of int64, shape (n_rows - block_sizes[0],): the row before each row after position 0."""
        if self.n_positions < 2:
            return np.zeros(0, dtype=np.int64)
        return np.concatenate([np.arange(self.block_starts[k - 1], self.block_starts[k - 1] + self.block_sizes[k])
                               for k in range(1, self.n_positions)]).astype(np.int64)

    def case_of_rows(self) -> np.ndarray:
        """ndarray of int64, shape (n_rows,): the case owning each position-major row."""
        if not self.n_positions:
            return np.zeros(0, dtype=np.int64)
        return np.concatenate([self.cases[:size] for size in self.block_sizes])

    def to_rows(self, values: np.ndarray) -> np.ndarray:
        """A position-major array back in timeline row order (only for a layout of every case)."""
        if self._row_positions is None:  # inverse of ``order``: gathering is faster than scattering
            self._row_positions = np.empty_like(self.order)
            self._row_positions[self.order] = np.arange(self.order.size)
        return np.take(values, self._row_positions, axis=0)


def case_layout(offsets: np.ndarray, cases: np.ndarray | None = None) -> CaseLayout:
    """Position-major layout of the contacts of ``cases`` (all cases when None).

    Parameters
    ----------
    offsets : ndarray of int64, shape (n_cases + 1,)
        Case boundaries of the timelines (CSR, as in :class:`hmm.Timelines`).
    cases : ndarray of int, shape (c,), optional
        The cases to lay out (for example one block of cases per thread).

    Returns
    -------
    CaseLayout
    """
    offsets = np.asarray(offsets, dtype=np.int64)
    all_counts = np.diff(offsets)
    cases = np.arange(all_counts.size, dtype=np.int64) if cases is None else np.asarray(cases, dtype=np.int64)
    counts = all_counts[cases]
    sort = np.argsort(-counts, kind="stable")
    cases = cases[sort]
    max_contacts = int(counts.max()) if counts.size else 0
    block_sizes = (counts.size - np.cumsum(np.bincount(counts, minlength=max_contacts + 1))[:max_contacts]
                   ).astype(np.int64)
    block_starts = np.concatenate([[0], np.cumsum(block_sizes)]).astype(np.int64)
    starts = offsets[:-1][cases]
    order = np.concatenate([starts[:size] + k for k, size in enumerate(block_sizes)]) if max_contacts else \
        np.zeros(0, dtype=np.int64)
    return CaseLayout(order.astype(np.int64, copy=False), block_sizes, block_starts, cases)


def _chunks(layout: CaseLayout, k: int):
    """(start, stop, start of the aligned previous rows) of each chunk of position ``k``."""
    start, size = int(layout.block_starts[k]), int(layout.block_sizes[k])
    before = int(layout.block_starts[k - 1]) if k else 0
    for offset in range(0, size, CHUNK_ROWS):
        stop = min(offset + CHUNK_ROWS, size)
        yield start + offset, start + stop, before + offset


def _row_sums(values: np.ndarray, out: np.ndarray) -> None:
    """``values.sum(axis=1)`` by adding columns in order: the same numbers (numpy adds a short row in order)
    several times faster for a few stages."""
    if values.shape[1] < 2 or values.shape[1] >= 8:   # numpy sums 8 or more pairwise: keep its order
        values.sum(axis=1, out=out)
        return
    np.add(values[:, 0], values[:, 1], out=out)
    for column in range(2, values.shape[1]):
        np.add(out, values[:, column], out=out)


def scaled_forward(layout: CaseLayout, initial: np.ndarray, likelihood: np.ndarray, step_matrices: np.ndarray,
                   step_index: np.ndarray, filtered: np.ndarray | None = None,
                   scale: np.ndarray | None = None) -> tuple:
    """Scaled forward recursion over a layout.

    ``alpha_0 = initial * e_0``; ``alpha_j = (filtered_{j-1} @ M_j) * e_j``; ``scale_j`` is the sum of
    ``alpha_j`` and ``filtered_j = alpha_j / scale_j`` (a row of zeros when ``scale_j`` is 0).

    Parameters
    ----------
    layout : CaseLayout
    initial : ndarray, shape (S,)
    likelihood : ndarray, shape (n_rows, S)
        Contact likelihoods ``e_j``, position-major.
    step_matrices : ndarray, shape (m, S, S)
    step_index : ndarray of int, shape (n_rows,)
        Position-major: the matrix of the step INTO each row (ignored at position 0).
    filtered, scale : ndarray, optional
        Output buffers, shapes (n_rows, S) and (n_rows,).

    Returns
    -------
    filtered : ndarray, shape (n_rows, S)
    scale : ndarray, shape (n_rows,)
    """
    n, n_stages = likelihood.shape
    filtered = np.empty((n, n_stages)) if filtered is None else filtered
    scale = np.empty(n) if scale is None else scale
    width = min(CHUNK_ROWS, n)
    gathered = np.empty((width, n_stages, n_stages))
    alpha = np.empty((width, n_stages))
    total = np.empty(width)
    for k in range(layout.n_positions):
        for lo, hi, before in _chunks(layout, k):
            h = hi - lo
            a, t = alpha[:h], total[:h]
            if k == 0:
                np.multiply(initial[None, :], likelihood[lo:hi], out=a)
            else:
                g = gathered[:h]
                np.take(step_matrices, step_index[lo:hi], axis=0, out=g, mode="clip")
                np.einsum("ns,nst->nt", filtered[before:before + h], g, out=a)
                np.multiply(a, likelihood[lo:hi], out=a)
            _row_sums(a, t)
            scale[lo:hi] = t
            np.divide(a, np.where(t > 0, t, 1.0)[:, None], out=filtered[lo:hi])
    return filtered, scale


def scaled_backward(layout: CaseLayout, likelihood: np.ndarray, scale: np.ndarray, step_matrices: np.ndarray,
                    step_index: np.ndarray, beta: np.ndarray | None = None, weighted: np.ndarray | None = None,
                    ) -> np.ndarray:
    """Scaled backward recursion over a layout.

    ``beta = 1`` at each case's last contact; ``beta_{j-1} = M_j @ (e_j * beta_j / scale_j)``.

    Parameters
    ----------
    layout : CaseLayout
    likelihood : ndarray, shape (n_rows, S)
    scale : ndarray, shape (n_rows,)
        Scale constants to divide by (from :func:`scaled_forward`, zeros replaced by the caller).
    step_matrices : ndarray, shape (m, S, S)
    step_index : ndarray of int, shape (n_rows,)
    beta : ndarray, shape (n_rows, S), optional
        Output buffer.
    weighted : ndarray, shape (n_rows, S), optional
        If given, receives ``e_j * beta_j / scale_j`` at every row after position 0 (the fitting
        likelihood's derivative with respect to step ``j``); it may be ``likelihood`` itself
        (each row is read before it is overwritten).

    Returns
    -------
    ndarray, shape (n_rows, S)
        ``beta``, so that ``filtered * beta`` is the smoothed distribution.
    """
    n, n_stages = likelihood.shape
    beta = np.empty((n, n_stages)) if beta is None else beta
    if n:
        beta[layout.current(layout.n_positions - 1).start:] = 1.0
    width = min(CHUNK_ROWS, n)
    gathered = np.empty((width, n_stages, n_stages))
    buffer = np.empty((width, n_stages))
    for k in range(layout.n_positions - 1, 0, -1):
        # rows of position k - 1 whose case has no k-th contact end their case: beta = 1
        ending = slice(int(layout.block_starts[k - 1] + layout.block_sizes[k]), int(layout.block_starts[k]))
        beta[ending] = 1.0
        for lo, hi, before in _chunks(layout, k):
            h = hi - lo
            w = buffer[:h] if weighted is None else weighted[lo:hi]
            np.multiply(likelihood[lo:hi], beta[lo:hi], out=w)
            np.divide(w, scale[lo:hi][:, None], out=w)
            g = gathered[:h]
            np.take(step_matrices, step_index[lo:hi], axis=0, out=g, mode="clip")
            np.einsum("nst,nt->ns", g, w, out=beta[before:before + h])
    return beta
