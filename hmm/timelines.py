"""Case timelines as flat numpy arrays: the engine's input for a whole caseload.

Contacts of all cases are stored flat, sorted by case then time, with ``offsets`` marking where
each case starts (CSR layout). Case ``i`` owns rows ``offsets[i]:offsets[i+1]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Timelines", "MISSING"]

#: Code for "not observed" in ``Timelines.observations``.
MISSING = -1


@dataclass(frozen=True)
class Timelines:
    """Contacts of many cases.

    Parameters
    ----------
    offsets : ndarray of int64, shape (n_cases + 1,)
        ``offsets[0] == 0``, non-decreasing, ``offsets[-1] == n_contacts``. Every case has at
        least one contact.
    times : ndarray of float64, shape (n_contacts,)
        Contact times in days (any origin), non-decreasing within each case.
    observations : ndarray of int16, shape (n_contacts, n_channels)
        Category index per channel, ``MISSING`` (-1) when not observed.
    allowed_stages : ndarray of bool, shape (n_contacts, n_stages)
        Stages the contact is compatible with: all True unless a stage was known directly
        (one stage, or a set of stages).
    covariates : ndarray of float64, shape (n_contacts, n_covariates)
        Covariate values recorded at each contact; they hold until the next contact.
    unscheduled : ndarray of bool, shape (n_contacts,), optional
        True for an unscheduled contact (``contact_kind`` "unscheduled"); None (the default) means
        every contact was scheduled. Used only by models with an ``unscheduled_contacts`` block.
    """

    offsets: np.ndarray
    times: np.ndarray
    observations: np.ndarray
    allowed_stages: np.ndarray
    covariates: np.ndarray
    unscheduled: np.ndarray | None = None

    def __post_init__(self):
        n = self.times.shape[0]
        if self.offsets.ndim != 1 or self.offsets[0] != 0 or self.offsets[-1] != n:
            raise ValueError("offsets must start at 0 and end at the number of contacts")
        if np.any(np.diff(self.offsets) < 1):
            raise ValueError("every case needs at least one contact")
        if self.unscheduled is not None:
            object.__setattr__(self, "unscheduled", np.asarray(self.unscheduled, dtype=bool).reshape(-1))
        for name in ("observations", "allowed_stages", "covariates") + (("unscheduled",) if self.unscheduled
                                                                        is not None else ()):
            if getattr(self, name).shape[0] != n:
                raise ValueError(f"{name} must have one row per contact ({n})")
        if n and np.any(~self.allowed_stages.any(axis=1)):
            raise ValueError("a contact must allow at least one stage")
        if n > 1:
            same_case = np.repeat(np.arange(self.n_cases), self.n_contacts_per_case)
            step = np.diff(self.times)
            if np.any((step < 0) & (same_case[1:] == same_case[:-1])):
                raise ValueError("contact times must be non-decreasing within each case")

    # ---------------------------------------------------------------- shapes
    @property
    def n_cases(self) -> int:
        return self.offsets.shape[0] - 1

    @property
    def n_contacts(self) -> int:
        return self.times.shape[0]

    @property
    def n_contacts_per_case(self) -> np.ndarray:
        """ndarray of int64, shape (n_cases,)."""
        return np.diff(self.offsets)

    @property
    def case_of_contact(self) -> np.ndarray:
        """Case index of every contact, ndarray of int64, shape (n_contacts,)."""
        return np.repeat(np.arange(self.n_cases), self.n_contacts_per_case)

    @property
    def first_index(self) -> np.ndarray:
        """Row of each case's first contact, shape (n_cases,)."""
        return self.offsets[:-1]

    @property
    def last_index(self) -> np.ndarray:
        """Row of each case's last contact, shape (n_cases,)."""
        return self.offsets[1:] - 1

    @property
    def unscheduled_mask(self) -> np.ndarray:
        """ndarray of bool, shape (n_contacts,): True for unscheduled contacts (all False when not recorded)."""
        if self.unscheduled is None:
            return np.zeros(self.n_contacts, dtype=bool)
        return self.unscheduled

    def _rows_unscheduled(self, rows) -> np.ndarray | None:
        return None if self.unscheduled is None else self.unscheduled[rows]

    # ----------------------------------------------------------- construction
    @classmethod
    def from_contacts(cls, case_index, times, observations, allowed_stages, covariates,
                      unscheduled=None) -> "Timelines":
        """Build from unsorted per-contact arrays; ``case_index`` (int, shape (n_contacts,)) names the case.

        Cases are numbered ``0..max(case_index)``; every number must have a contact. Rows are sorted
        stably by (case, time).
        """
        case_index = np.asarray(case_index, dtype=np.int64)
        times = np.asarray(times, dtype=float)
        order = np.lexsort((times, case_index))
        counts = np.bincount(case_index, minlength=case_index.max() + 1 if case_index.size else 0)
        offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        return cls(
            offsets=offsets,
            times=times[order],
            observations=np.asarray(observations, dtype=np.int16)[order],
            allowed_stages=np.asarray(allowed_stages, dtype=bool)[order],
            covariates=np.asarray(covariates, dtype=float)[order],
            unscheduled=None if unscheduled is None else np.asarray(unscheduled, dtype=bool)[order],
        )

    def with_observation_end(self, end, extend=None) -> "Timelines":
        """These timelines with one blank *scheduled* contact at ``end`` after each case's last contact.

        A blank scheduled contact (nothing recorded, every stage allowed, the last contact's
        covariates) adds exactly the quiet time since the last contact to a timing model's
        likelihood: ``P(no unscheduled contact until end)``. Fitting with it uses every day the
        service was watching, not just the days up to each case's last contact.

        Parameters
        ----------
        end : float or ndarray, shape (n_cases,)
            Day observation ended (for example the day the data were extracted).
        extend : ndarray of bool, shape (n_cases,), optional
            Cases to extend (default: every case whose last contact is before ``end``).

        Returns
        -------
        Timelines
            Marked unscheduled where the original was (the new contacts are scheduled).
        """
        end = np.broadcast_to(np.asarray(end, dtype=float), (self.n_cases,))
        last = self.last_index
        chosen = end > self.times[last]
        if extend is not None:
            chosen &= np.asarray(extend, dtype=bool)
        at = self.offsets[1:][chosen]
        observations = np.insert(self.observations, at, MISSING, axis=0)
        allowed = np.insert(self.allowed_stages, at, True, axis=0)
        return Timelines(
            offsets=np.concatenate([[0], np.cumsum(self.n_contacts_per_case + chosen)]).astype(np.int64),
            times=np.insert(self.times, at, end[chosen]),
            observations=observations, allowed_stages=allowed,
            covariates=np.insert(self.covariates, at, self.covariates[last[chosen]], axis=0),
            unscheduled=np.insert(self.unscheduled_mask, at, False))

    # -------------------------------------------------------------- selection
    def subset(self, cases) -> "Timelines":
        """Timelines of the chosen cases (index array or boolean mask), in the order given."""
        cases = np.asarray(cases)
        if cases.dtype == bool:
            cases = np.flatnonzero(cases)
        counts = self.n_contacts_per_case[cases]
        starts = self.offsets[cases]
        rows = np.repeat(starts - np.concatenate([[0], np.cumsum(counts)[:-1]]), counts) + np.arange(counts.sum())
        return Timelines(
            offsets=np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
            times=self.times[rows],
            observations=self.observations[rows],
            allowed_stages=self.allowed_stages[rows],
            covariates=self.covariates[rows],
            unscheduled=self._rows_unscheduled(rows),
        )

    def until(self, time: float) -> tuple["Timelines", np.ndarray]:
        """Contacts at or before ``time``.

        Returns
        -------
        timelines : Timelines
            Only cases whose first contact is at or before ``time``, only their contacts up to it.
        kept_cases : ndarray of int64
            Indices (into this object's cases) of the cases kept, in order.
        """
        keep_row = self.times <= time
        if keep_row.all() and (self.n_cases == 0 or bool((np.diff(self.offsets) > 0).all())):
            return self, np.arange(self.n_cases, dtype=np.int64)  # nothing to cut (the usual case)
        kept_counts = np.add.reduceat(keep_row.astype(np.int64), self.offsets[:-1]) if self.n_contacts else \
            np.zeros(0, dtype=np.int64)
        kept_cases = np.flatnonzero(kept_counts > 0)
        return Timelines(
            offsets=np.concatenate([[0], np.cumsum(kept_counts[kept_cases])]).astype(np.int64),
            times=self.times[keep_row],
            observations=self.observations[keep_row],
            allowed_stages=self.allowed_stages[keep_row],
            covariates=self.covariates[keep_row],
            unscheduled=self._rows_unscheduled(keep_row),
        ), kept_cases
