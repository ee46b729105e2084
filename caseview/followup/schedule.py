"""Next contact due: the day a case's follow-up probability would reach the threshold.

If nothing new is observed, a case's stage distribution moves forward from the as-of date as
``p(t) = p_now expm(Q t)`` with ``Q`` from the last recorded covariates (Kolmogorov forward
equation). The next contact is due on the first whole day ``t >= 0`` with
``sum_{s in follow-up} p(t)[s] >= threshold``: day 0 (the as-of date) when the case is already over,
and "never" (-1) when it does not get there within the search limit.

The search is exact on whole days and batched over the caseload: for each distinct covariate row
the matrices ``P(1) ... P(B)`` of one block of ``B`` days are computed once; each block step is a
matrix product over every still-open case, and the block's last day starts the next block. Cases
that cannot reach the threshold within the limit (their chance of *reaching* a follow-up stage by
then is already under it) are answered without the search.
"""

from __future__ import annotations

import numpy as np

from hmm.forecasting import reach_probability
from hmm.transition import distinct_transition_matrices, factorise

#: How far ahead the schedule looks, in days (two years).
SEARCH_LIMIT_DAYS = 730
#: Days per block of the search (one einsum per block).
BLOCK_DAYS = 30
NEVER = -1


def days_until_threshold(model, probabilities, covariates, threshold: float,
                         limit_days: int = SEARCH_LIMIT_DAYS, block_days: int = BLOCK_DAYS) -> np.ndarray:
    """First whole day on which P(follow-up stage) reaches ``threshold`` with no new contact.

    Parameters
    ----------
    model : hmm.StageModel
        Its ``follow_up_mask`` defines the follow-up stages.
    probabilities : ndarray, shape (n_cases, n_stages)
        Stage probabilities on the as-of date.
    covariates : ndarray, shape (n_cases, n_covariates)
        Covariates assumed to hold from the as-of date on (the last recorded ones).
    threshold : float
    limit_days : int
        Largest offset searched.
    block_days : int

    Returns
    -------
    ndarray of int64, shape (n_cases,)
        Offset in days from the as-of date (0 = already at or over), or -1 (:data:`NEVER`) when the
        threshold is not reached within ``limit_days``.
    """
    probabilities = np.atleast_2d(np.asarray(probabilities, dtype=float))
    n = probabilities.shape[0]
    mask = model.follow_up_mask
    result = np.full(n, NEVER, dtype=np.int64)
    if n == 0 or not mask.any():
        return result
    covariates = np.asarray(covariates, dtype=float).reshape(n, -1)
    if covariates.shape[1]:
        distinct, group = _distinct_rows(covariates)
    else:
        distinct, group = np.zeros((1, 0)), np.zeros(n, dtype=np.int64)
    already = probabilities[:, mask].sum(axis=1) >= threshold
    result[already] = 0
    open_cases = np.flatnonzero(~already)
    if not open_cases.size or limit_days < 1:
        return result
    # Exact pruning: being in a follow-up stage on day d means having reached one by day d, so a
    # case whose chance of reaching follow-up within the whole limit is under the threshold never
    # gets there (the 1e-9 margin keeps rounding from pruning a case that would).
    reach = reach_probability(model, probabilities[open_cases], covariates[open_cases], float(limit_days), mask)
    open_cases = open_cases[reach >= threshold - 1e-9]
    if not open_cases.size:
        return result
    block = int(max(1, min(block_days, limit_days)))
    generators = model.generators(distinct)
    steps = np.arange(1, block + 1, dtype=float)
    matrices, index = distinct_transition_matrices(
        generators, np.tile(steps, distinct.shape[0]), np.repeat(np.arange(distinct.shape[0]), block))
    table = matrices[index].reshape(distinct.shape[0], block, model.n_stages, model.n_stages)
    follow_up_table = table[..., mask].sum(axis=-1)  # (G, B, S): P(in follow-up after d days | stage)
    if distinct.shape[0] <= _GROUPS_FOR_MATRIX_PRODUCTS:
        # one distinct covariate row at a time: each block step is two plain products, no per-case gather
        for g in range(distinct.shape[0]):
            mine = open_cases[group[open_cases] == g]
            levels = np.ascontiguousarray(follow_up_table[g].T)[None]
            _search(result, mine, probabilities[mine], levels, table[g, -1][None],
                    np.zeros(mine.size, dtype=np.int64), threshold, limit_days, block)
    else:
        _search(result, open_cases, probabilities[open_cases], np.swapaxes(follow_up_table, 1, 2), table[:, -1],
                group[open_cases], threshold, limit_days, block)
    return result


def _distinct_rows(covariates: np.ndarray) -> tuple:
    """Distinct covariate rows (sorted) and the index of each row; ``np.unique(axis=0)`` without
    its row-wise sort: each column is coded on its own (fast 1-D) and the codes combined."""
    key = np.zeros(covariates.shape[0], dtype=np.int64)
    for column in covariates.T:
        values, codes = factorise(column)
        if key.max(initial=0) >= 2**62 // max(values.size, 1):
            distinct, group = np.unique(covariates, axis=0, return_inverse=True)
            return distinct, group.reshape(-1)
        key = key * values.size + codes
    keys, group = factorise(key)
    first = np.zeros(keys.size, dtype=np.int64)
    first[group[::-1]] = np.arange(group.size - 1, -1, -1)  # a row holding each distinct key
    return covariates[first], group


#: Up to this many distinct covariate rows, the search runs per row with matrix products (no gather).
_GROUPS_FOR_MATRIX_PRODUCTS = 64


def _search(result, cases, current, levels, last_step, group, threshold, limit_days, block):
    """Block-by-block search for ``cases`` (writes ``result``).

    ``levels[g]`` (S, B): P(follow-up after day 1..B | stage); ``last_step[g]`` (S, S): P(B days);
    ``group`` (n,): index into both for each case (all 0 when there is one group).
    """
    single = levels.shape[0] == 1
    start = 0
    while cases.size and start < limit_days:
        if single:
            # einsum, not @: a multi-threaded BLAS call per block waits for a second core on a busy machine
            level = np.einsum("ns,sb->nb", current, levels[0])  # (n_open, B)
        else:
            level = np.einsum("ns,nsb->nb", current, levels[group])
        days = start + np.arange(1, block + 1)
        level[:, days > limit_days] = -np.inf
        crossed = level >= threshold
        hit = crossed.any(axis=1)
        result[cases[hit]] = start + 1 + crossed[hit].argmax(axis=1)
        keep = ~hit
        cases, current, group = cases[keep], current[keep], group[keep]
        # einsum here too: a BLAS product (``@``) of these small shapes is slower under load (measured 2-4x)
        current = (np.einsum("ns,st->nt", current, last_step[0]) if single
                   else np.einsum("ns,nst->nt", current, last_step[group]))
        start += block


def next_contact_due_day(model, probabilities, covariates, threshold: float, as_of_day: int,
                         limit_days: int = SEARCH_LIMIT_DAYS) -> np.ndarray:
    """Calendar day (days since 1970-01-01) the next contact is due, or -1 for "not within the limit".

    Returns
    -------
    ndarray of int64, shape (n_cases,)
    """
    offsets = days_until_threshold(model, probabilities, covariates, threshold, limit_days)
    return np.where(offsets >= 0, int(as_of_day) + offsets, NEVER).astype(np.int64)


def contact_due_day(model, p_now, covariates, threshold: float, as_of_day: int, p_at_last_contact=None,
                    last_contact_day=None, routine_days: float | None = None,
                    limit_days: int = SEARCH_LIMIT_DAYS) -> np.ndarray:
    """A next-contact date for every case: when the follow-up chance reaches the threshold, or the
    routine limit after the last contact, whichever comes first.

    * A case under the threshold on the as-of date: the day it would reach it with nothing new
      observed (as :func:`next_contact_due_day`).
    * A case already over it: the first day after its last contact on which it got there (the
      chance carried forward from the last contact with the covariates recorded there); the case
      is overdue by the days since. Without ``p_at_last_contact`` the as-of date is used.
    * ``routine_days`` after the last contact at the latest (a person is due a contact anyway when
      not seen for that long), so no case goes without a date; without it a case that never reaches
      the threshold within ``limit_days`` keeps -1.

    Parameters
    ----------
    p_now : ndarray, shape (n_cases, n_stages)
    covariates : ndarray, shape (n_cases, n_covariates)
        Last recorded covariates.
    p_at_last_contact : ndarray, shape (n_cases, n_stages), optional
    last_contact_day : ndarray of int, shape (n_cases,), optional
    routine_days : float, optional

    Returns
    -------
    ndarray of int64, shape (n_cases,)
        Calendar day (days since 1970-01-01); before ``as_of_day`` means overdue.
    """
    due = next_contact_due_day(model, p_now, covariates, threshold, as_of_day, limit_days)
    if last_contact_day is None:
        return due
    last = np.asarray(last_contact_day, dtype=np.int64)
    if p_at_last_contact is not None:
        over = np.flatnonzero(due == int(as_of_day))
        gaps = int(as_of_day) - last[over]
        if over.size and gaps.max(initial=0) > 0:
            covariates = np.asarray(covariates, dtype=float).reshape(np.asarray(p_now).shape[0], -1)
            offsets = days_until_threshold(model, np.asarray(p_at_last_contact)[over], covariates[over], threshold,
                                           int(gaps.max()))
            # over on the as-of date, so the first crossing is within the gap (-1 only from rounding)
            found = np.where((offsets >= 0) & (offsets <= gaps), offsets, gaps)
            due[over] = last[over] + found
    if routine_days is not None:
        routine = last + int(round(routine_days))
        due = np.where(due >= 0, np.minimum(due, routine), routine)
    return due.astype(np.int64)
