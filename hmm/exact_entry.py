"""The exact-entry convention and the contradiction rule: their one home.

Exact entry into an absorbing stage: when a contact allows exactly one stage ``s`` and ``s`` is in
``model.exact_entry_stages``, the contact records the date the case *entered* ``s`` (the forward
pass then uses the entry density, see :mod:`hmm.inference`). :func:`effective_allowed_stages`
says what every other kind of record means for those stages; the forward pass, the fitting
likelihood and the fit check all call it. :func:`contacts_after_absorbing_entry` finds the
records that contradict an entry (import, scoring and the application's checks call it).
"""

from __future__ import annotations

import numpy as np

from .model import StageModel

__all__ = ["effective_allowed_stages", "contacts_after_absorbing_entry", "exact_entry_stage_mask", "entry_steps"]


def exact_entry_stage_mask(model: StageModel) -> np.ndarray:
    """ndarray of bool, shape (n_stages,): the stages in ``model.exact_entry_stages``."""
    mask = np.zeros(model.n_stages, dtype=bool)
    for name in model.exact_entry_stages:
        mask[model.stage_index(name)] = True
    return mask


def _every_stage(allowed: np.ndarray) -> np.ndarray:
    """Rows allowing every stage (no known stage), shape (n,); column by column (far faster than ``all(axis=1)``)."""
    every = allowed[:, 0].copy() if allowed.shape[1] else np.ones(allowed.shape[0], dtype=bool)
    for column in range(1, allowed.shape[1]):
        every &= allowed[:, column]
    return every


def effective_allowed_stages(model: StageModel, allowed: np.ndarray) -> np.ndarray:
    """Allowed stages once the exact-entry convention is applied, shape (n_contacts, n_stages).

    The one home of the convention (the fitting likelihood and the fit check call it too):

    * a contact recording **one** exact-entry stage ``s`` dates the entry into ``s`` (its step is
      the entry density, see :func:`_prepare`);
    * a contact with **no** known stage (every stage allowed) cannot be in an exact-entry stage:
      an entry is always recorded, and it ends the ordinary contacts;
    * a **set** of several stages that includes an exact-entry stage ``s`` (``Crisis|Moved``) is an
      ordinary "one of these on that date" record: the case may be in ``s``, having entered it on
      or before that date (the entry date is not known), so ``s`` stays allowed with the ordinary
      probability P(prev -> s, gap), not the entry density. A set naming every stage says
      nothing and is read like no known stage.
    """
    if not model.exact_entry_stages:
        return allowed
    exact_mask = exact_entry_stage_mask(model)
    drop = _every_stage(allowed)
    if not drop.any():
        return allowed
    allowed = allowed.copy()
    allowed[np.ix_(drop, exact_mask)] = False
    return allowed


def contacts_after_absorbing_entry(model: StageModel, offsets: np.ndarray, allowed: np.ndarray) -> np.ndarray:
    """Contacts that contradict an earlier recorded entry into an absorbing exact-entry stage.

    Once a case's contact records one exact-entry stage ``s`` alone (the entry), the case stays in
    ``s`` for good; a later contact whose allowed stages (after :func:`effective_allowed_stages`)
    exclude ``s`` is impossible under the model (its likelihood is zero). Both the import checks
    and the scoring's "cannot be scored" reasons use this one rule.

    Parameters
    ----------
    model : StageModel
    offsets : ndarray of int64, shape (n_cases + 1,)
        Case boundaries (CSR, as in :class:`Timelines`); contacts sorted by time within a case.
    allowed : ndarray of bool, shape (n_contacts, n_stages)
        Recorded allowed stages (all True when no stage is known).

    Returns
    -------
    ndarray of int64, shape (n_contacts,)
        For each contradicting contact, the row of the case's first entry record it contradicts;
        -1 for every other contact.
    """
    n = allowed.shape[0]
    result = np.full(n, -1, dtype=np.int64)
    if not n or not model.exact_entry_stages:
        return result
    known = np.flatnonzero(~_every_stage(allowed))   # an entry record is a known stage: usually few rows
    entries = known[_exact_entry_contacts(model, allowed[known])]
    if not entries.size:
        return result
    case_of_entry = np.searchsorted(offsets, entries, side="right") - 1
    cases, first = np.unique(case_of_entry, return_index=True)   # entries are in row order: the earliest
    first_entry = entries[first]
    ends = offsets[cases + 1]
    counts = ends - first_entry - 1                                # contacts after the entry, per case
    if not counts.sum():
        return result
    later = np.repeat(first_entry + 1 - np.concatenate([[0], np.cumsum(counts)[:-1]]), counts) + \
        np.arange(counts.sum())
    entry_of_later = np.repeat(first_entry, counts)
    entered_stage = np.argmax(allowed[entry_of_later], axis=1)
    effective = effective_allowed_stages(model, allowed[later])
    bad = ~effective[np.arange(later.size), entered_stage]
    result[later[bad]] = entry_of_later[bad]
    return result


def _exact_entry_contacts(model: StageModel, allowed: np.ndarray) -> np.ndarray:
    """Boolean (n_contacts,): the contact records the exact date of entry into its one allowed stage."""
    if not model.exact_entry_stages:
        return np.zeros(allowed.shape[0], dtype=bool)
    # Compare bit-packed rows with the one-stage patterns (much faster than row sums over bools).
    packed = np.packbits(allowed, axis=1, bitorder="little")
    result = np.zeros(allowed.shape[0], dtype=bool)
    for name in model.exact_entry_stages:
        pattern = np.zeros((1, model.n_stages), dtype=bool)
        pattern[0, model.stage_index(name)] = True
        result |= (packed == np.packbits(pattern, axis=1, bitorder="little")).all(axis=1)
    return result


def entry_steps(model: StageModel, allowed: np.ndarray, into_rows: np.ndarray, from_rows: np.ndarray) -> np.ndarray:
    """Which steps between two contacts record an exact entry (their step matrix is the entry density).

    A step from contact ``from_rows[i]`` to contact ``into_rows[i]`` records an entry when the later
    contact records one exact-entry stage alone and the earlier one did not already record that same
    stage alone (a second record of an absorbing stage is a step within it, probability 1, not a
    new entry). Scoring and the fitting likelihood both take the rule from here.

    Parameters
    ----------
    model : StageModel
    allowed : ndarray of bool, shape (n_contacts, n_stages)
        Recorded allowed stages.
    into_rows, from_rows : ndarray of int, shape (n_steps,)
        The later and the earlier contact of each step.

    Returns
    -------
    ndarray of bool, shape (n_steps,)
    """
    into_rows = np.asarray(into_rows, dtype=np.int64)
    result = np.zeros(into_rows.size, dtype=bool)
    if not into_rows.size or not model.exact_entry_stages:
        return result
    exact = _exact_entry_contacts(model, allowed)
    result = exact[into_rows]
    again = np.flatnonzero(result & exact[from_rows])
    if again.size:
        same = (allowed[into_rows[again]] == allowed[np.asarray(from_rows)[again]]).all(axis=1)
        result[again[same]] = False
    return result
