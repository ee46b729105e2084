"""Each case's stage probabilities now under drawn parameters (the outlook's parameter uncertainty).

A case's "now" distribution is the forward filter over its own contacts, so it depends on every
parameter (the channels' probabilities as much as the rates). For each parameter draw the outlook
needs, per covariate group, the sums of ``p``, ``p p^T`` and ``p (x) p (x) p`` over the open cases
(:class:`caseview.followup.occupancy.GroupSums`), and for small counts the cases' probabilities.

How it is done, so that every draw moves "now" and the forecast together:

* at most :data:`NOW_SAMPLE_CASES` open cases: every case is rescored under every draw (exact);
* above that, a random sample of that many open cases, stratified by covariate group (each group
  in proportion, at least :data:`MIN_PER_GROUP` cases or all of a smaller group), drawn once with
  the outlook's seeded generator, is rescored under every draw. Each sampled case gets its own
  rescored probabilities; every other case of the group is moved by the group's average change
  on the sample (``p_i + delta_g``). The group's sum of ``p`` is then the usual unbiased
  difference estimator ``sum_i p_i + N_g * mean_sample(change)``; the second and third power sums
  leave out the spread of the change between cases outside the sample (a second-order term).
  ``benchmarks/outlook.py --stability`` compares the bands with a larger sample and with every
  case rescored.

A draw that moved no parameter (:attr:`ParameterDraws.at_fit`) keeps the fitted probabilities,
so draws at the fitted values give exactly the outlook without parameter uncertainty. A case
that cannot be scored under a draw (its rates overflow) keeps its fitted probabilities.
"""

from __future__ import annotations

import numpy as np

from .occupancy import GroupSums, group_sums

#: Open cases rescored under every parameter draw; above it, a stratified sample of this size.
NOW_SAMPLE_CASES = 5000
#: Fewest cases sampled from a covariate group (all of a smaller group).
MIN_PER_GROUP = 50


def stratified_sample(group: np.ndarray, n_groups: int, size: int, rng: np.random.Generator) -> np.ndarray:
    """Positions (sorted) of a sample of about ``size`` cases, each group in proportion.

    Parameters
    ----------
    group : ndarray of int, shape (n,)
    size : int
        ``size >= n`` (or ``size <= 0``) takes every case.
    """
    n = group.shape[0]
    if size <= 0 or size >= n:
        return np.arange(n)
    counts = np.bincount(group, minlength=n_groups)
    picked = []
    for g in range(n_groups):
        members = np.flatnonzero(group == g)
        take = min(counts[g], max(MIN_PER_GROUP, int(round(size * counts[g] / n))))
        picked.append(rng.choice(members, size=take, replace=False) if take < counts[g] else members)
    return np.sort(np.concatenate(picked)) if picked else np.zeros(0, dtype=np.int64)


def shifted_sums(sums: GroupSums, counts: np.ndarray, shift: np.ndarray) -> GroupSums:
    """The power sums of ``p_i + delta_g`` from those of ``p_i`` (``counts`` (G,) cases, ``shift`` (G, S)).

    ``sum (p + d)(p + d)^T = S2 + d S1^T + S1 d^T + N d d^T`` and likewise for the third power
    (eight terms), so moving a group by one vector needs no pass over its cases.
    """
    d, n = shift, counts.astype(float)
    s1, s2, s3 = sums.first, sums.second, sums.third
    first = s1 + n[:, None] * d
    second = s2 + d[:, :, None] * s1[:, None, :] + s1[:, :, None] * d[:, None, :] + n[:, None, None] * d[:, :, None] * d[:, None, :]
    third = (s3 + d[:, :, None, None] * s2[:, None, :, :] + d[:, None, :, None] * s2[:, :, None, :]
             + d[:, None, None, :] * s2[:, :, :, None]
             + d[:, :, None, None] * d[:, None, :, None] * s1[:, None, None, :]
             + d[:, :, None, None] * s1[:, None, :, None] * d[:, None, None, :]
             + s1[:, :, None, None] * d[:, None, :, None] * d[:, None, None, :]
             + n[:, None, None, None] * d[:, :, None, None] * d[:, None, :, None] * d[:, None, None, :])
    return GroupSums(first, second, third)


class NowUnderDraws:
    """The open cases' "now" under drawn models (see the module docstring).

    Parameters
    ----------
    timelines : hmm.Timelines
        Contacts up to the as-of date: of the open cases in the order of ``p_now``, or of more
        cases with ``rows`` saying which (only the cases rescored are copied out).
    p_now : ndarray, shape (n_open, S)
        Fitted stage probabilities now.
    group : ndarray of int, shape (n_open,)
        Covariate group of each case; ``n_groups`` groups.
    as_of_day : int
    rng : numpy.random.Generator
        Draws the sample (when the caseload is larger than ``sample_size``).
    sample_size : int
        :data:`NOW_SAMPLE_CASES` by default; 0 rescores every case.
    rows : ndarray of int, shape (n_open,), optional
        Cases of ``timelines`` in the order of ``p_now`` (None: ``timelines`` holds exactly them).
    """

    def __init__(self, timelines, p_now: np.ndarray, group: np.ndarray, n_groups: int, as_of_day: int,
                 rng: np.random.Generator, sample_size: int = NOW_SAMPLE_CASES, rows=None):
        self.p_now, self.group, self.n_groups, self.as_of_day = p_now, group, n_groups, as_of_day
        self.sample = stratified_sample(group, n_groups, sample_size, rng)
        self.everyone = self.sample.size == group.shape[0]
        if rows is None:
            self.timelines = timelines if self.everyone else timelines.subset(self.sample)
        else:
            self.timelines = timelines.subset(np.asarray(rows)[self.sample])
        self.fitted = p_now[self.sample]
        self.sample_group = group[self.sample]
        self.sample_counts = np.bincount(self.sample_group, minlength=n_groups)
        if not self.everyone:
            base = group_sums(p_now, group, n_groups)
            taken = group_sums(self.fitted, self.sample_group, n_groups)
            self.rest = GroupSums(base.first - taken.first, base.second - taken.second, base.third - taken.third)
            self.rest_counts = np.bincount(group, minlength=n_groups) - self.sample_counts

    def rescored(self, model) -> np.ndarray:
        """The sampled cases' probabilities now under ``model``, shape (n_sample, S) (fitted where not scorable)."""
        from hmm.forecasting import stage_probabilities_now

        with np.errstate(all="ignore"):
            p = stage_probabilities_now(model, self.timelines, float(self.as_of_day))
        bad = ~np.isfinite(p).all(axis=1) | (np.abs(p.sum(axis=1) - 1.0) > 1e-6)
        p[bad] = self.fitted[bad]
        return p

    def under(self, model, at_fit: bool = False) -> tuple:
        """``(sums, probabilities)`` under ``model``: :class:`GroupSums` over the open cases, and a
        function giving every open case's probabilities now, shape (n_open, S) (for small counts)."""
        if at_fit:
            return None, None
        now = self.rescored(model)
        if self.everyone:
            return group_sums(now, self.group, self.n_groups), lambda: now
        change = now - self.fitted
        shift = np.zeros((self.n_groups, now.shape[1]))
        np.add.at(shift, self.sample_group, change)
        shift /= np.maximum(self.sample_counts, 1)[:, None]
        moved = shifted_sums(self.rest, self.rest_counts, shift)
        exact = group_sums(now, self.sample_group, self.n_groups)
        sums = GroupSums(moved.first + exact.first, moved.second + exact.second, moved.third + exact.third)

        def probabilities():
            p = np.clip(self.p_now + shift[self.group], 0.0, 1.0)
            p /= p.sum(axis=1, keepdims=True)
            p[self.sample] = now
            return p

        return sums, probabilities
