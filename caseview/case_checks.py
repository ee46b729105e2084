"""Checks of a case's records against the model, shared by import, record, scoring and fitting.

One rule, one home:

* :func:`covariate_range_problem` / :func:`covariate_values_outside_range` - covariate values
  outside the model's ranges (declared in the model file, or seen when it was fitted);
* :func:`contradictory_contacts` - a contact after the case's recorded entry into an absorbing
  exact-entry stage (the rule itself is the engine's,
  :func:`hmm.exact_entry.contacts_after_absorbing_entry`); import and the record command call it on
  the case's stored contacts together with the new ones (:func:`stored_contradictions` does that
  inside the write transaction);
* :func:`unscorable_reasons` - why each case of a caseload cannot be scored ('' when it can),
  before the engine runs; :mod:`caseview.scoring` adds the cases the engine finds impossible.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseview.dates import day_text


def covariate_range_problem(name: str, low: float, high: float) -> str:
    """The one wording of "outside the covariate's range" (import, record and scoring use it)."""
    return (f"outside the range of {name}: expected a number from {low:g} to {high:g} (the range the model "
            "declares or was fitted on; a typing error? a model file may declare a wider 'range')")


def outside_range(values: np.ndarray, low: float, high: float) -> np.ndarray:
    """The one range rule: True where a value is below ``low`` or above ``high`` (both ends allowed; nan is not
    outside - it is refused as "not a number" where it can occur)."""
    with np.errstate(invalid="ignore"):
        return (np.asarray(values, dtype=float) < low) | (np.asarray(values, dtype=float) > high)


def covariate_values_outside_range(model, covariates: np.ndarray) -> np.ndarray:
    """Which values lie outside the model's covariate ranges, ndarray of bool, shape (n, n_covariates).

    Parameters
    ----------
    model : hmm.StageModel
    covariates : ndarray, shape (n, n_covariates), in the model's covariate order
    """
    covariates = np.asarray(covariates, dtype=float)
    if covariates.ndim != 2:  # (n, 0) stays (n, 0): a model without covariates
        covariates = covariates.reshape(-1, model.n_covariates) if model.n_covariates else covariates.reshape(0, 0)
    outside = np.zeros(covariates.shape, dtype=bool)
    for k, name in enumerate(model.covariates):
        bounds = model.range_of.get(name)
        if bounds is not None:
            outside[:, k] = outside_range(covariates[:, k], *bounds)
    return outside


@dataclass(frozen=True)
class ContradictoryContact:
    """A contact after its case's recorded entry into an absorbing exact-entry stage.

    ``row`` and ``entry_row`` index the arrays given to :func:`contradictory_contacts`.
    """

    case_id: str
    day: int
    entry_day: int
    stage: str
    row: int
    entry_row: int

    @property
    def reason(self) -> str:
        """The reason shown wherever the case cannot be scored."""
        return (f"contradictory record: contact on {np.datetime64(self.day, 'D')} after the recorded entry into "
                f"absorbing stage {self.stage} on {np.datetime64(self.entry_day, 'D')}")


def contradiction_message(found: "ContradictoryContact", later: str, earlier: str, remedy: str) -> str:
    """The one sentence import and case work give for a contact after a recorded absorbing entry.

    ``later``/``earlier`` say where each contact is (``"line 7"``, ``"this contact"``, ``"the stored
    contact of 2026-01-05"``); ``remedy`` ends the sentence (what the person can do instead).
    """
    return (f"case {found.case_id!r}: the contact on {np.datetime64(found.day, 'D')} ({later}) comes after the "
            f"recorded entry into absorbing stage {found.stage!r} on {np.datetime64(found.entry_day, 'D')} "
            f"({earlier}); a case that has entered it has no later contacts unless they record that stage - "
            f"{remedy}")


def contradictory_contacts(model, case_codes, days, stage_known) -> list:
    """Contacts that come after their case's recorded entry into an absorbing exact-entry stage.

    The one check that import and the record command call (with the case's stored contacts and the
    new ones together), so both refuse the same records; the rule itself is the engine's
    (:func:`hmm.exact_entry.contacts_after_absorbing_entry`), which is also what makes such a case
    impossible when scored.

    Parameters
    ----------
    model : hmm.StageModel
    case_codes : array of str, shape (n,)
    days : array of int, shape (n,)
        Days since 1970-01-01; at most one contact per case and day.
    stage_known : array of str, shape (n,)
        '' or stage names joined with '|'.

    Returns
    -------
    list[ContradictoryContact]
        In the order of case, then day.
    """
    from hmm.exact_entry import contacts_after_absorbing_entry

    case_codes = np.asarray(case_codes, dtype=object)
    days = np.asarray(days, dtype=np.int64)
    stage_known = np.asarray(stage_known, dtype=object)
    if not model.exact_entry_stages or not days.size:
        return []
    order = np.lexsort((days, case_codes.astype(str)))
    codes, days, known = case_codes[order], days[order], stage_known[order]
    starts = np.flatnonzero(np.concatenate([[True], codes[1:] != codes[:-1]]))
    offsets = np.concatenate([starts, [codes.size]]).astype(np.int64)
    allowed = np.ones((codes.size, model.n_stages), dtype=bool)
    recorded = np.flatnonzero(known != "")
    if recorded.size:
        values, inverse = np.unique(known[recorded].astype(str), return_inverse=True)
        masks = np.array([[stage in value.split("|") for stage in model.stages] for value in values], dtype=bool)
        masks[~masks.any(axis=1)] = True   # names the model does not know: no constraint here
        allowed[recorded] = masks[inverse.reshape(-1)]
    entry_of = contacts_after_absorbing_entry(model, offsets, allowed)
    found = []
    for row in np.flatnonzero(entry_of >= 0).tolist():
        entry = int(entry_of[row])
        found.append(ContradictoryContact(str(codes[row]), int(days[row]), int(days[entry]),
                                          model.stages[int(np.argmax(allowed[entry]))], int(order[row]),
                                          int(order[entry])))
    return found


def stored_contradictions(connection, model, case_codes=None) -> list:
    """:func:`contradictory_contacts` over the stored contacts (of ``case_codes`` only, when given).

    Call it inside the write transaction that adds or changes contacts (import does; the record
    command should), then refuse and roll back when it finds any: it sees that transaction's rows.
    Only cases that record an exact-entry stage are read.

    Returns
    -------
    list[ContradictoryContact]
        ``row``/``entry_row`` index the stored contacts read; use ``case_id``, ``day``, ``entry_day``.
    """
    from .storage.contacts import contacts_of_cases_with_stage

    if not model.exact_entry_stages:
        return []
    codes, days, known = contacts_of_cases_with_stage(connection, model.exact_entry_stages)
    if case_codes is not None and codes.size:
        keep = np.isin(codes.astype(str), np.asarray(list(case_codes), dtype=str))
        codes, days, known = codes[keep], days[keep], known[keep]
    return contradictory_contacts(model, codes, days, known)


#: Reason for a case whose evidence has probability zero under the model (found by the engine).
IMPOSSIBLE_REASON = ("impossible under the current model: its records have probability zero (for example a known "
                     "stage the model cannot reach from the case's earlier stages)")


def _date(day) -> str:
    return day_text(day)


def unscorable_reasons(model, timelines) -> np.ndarray:
    """Why each case cannot be scored, before the engine runs; '' for the cases that can.

    Checks, in this order (the first that applies is the reason): covariate values outside the
    model's ranges; covariate values that make a transition rate overflow
    (:meth:`hmm.StageModel.usable_covariate_rows`, only needed for covariates without a range,
    since the model's rates are checked over its ranges); a contact after a recorded entry into
    an absorbing exact-entry stage.

    Parameters
    ----------
    model : hmm.StageModel
    timelines : hmm.Timelines
        ``times`` in days since 1970-01-01.

    Returns
    -------
    ndarray of object, shape (n_cases,)
    """
    from hmm.exact_entry import contacts_after_absorbing_entry, effective_allowed_stages

    n_cases = timelines.n_cases
    reasons = np.full(n_cases, "", dtype=object)
    if not timelines.n_contacts:
        return reasons
    covariates = timelines.covariates

    def first_row_per_case(bad_rows: np.ndarray) -> dict:
        rows = np.flatnonzero(bad_rows)
        cases, first = np.unique(np.searchsorted(timelines.offsets, rows, side="right") - 1, return_index=True)
        return {int(c): int(rows[f]) for c, f in zip(cases, first) if reasons[c] == ""}

    outside = covariate_values_outside_range(model, covariates)
    if outside.any():
        for case, row in first_row_per_case(outside.any(axis=1)).items():
            k = int(np.argmax(outside[row]))
            name = model.covariates[k]
            low, high = model.range_of[name]
            reasons[case] = (f"covariate {name} = {covariates[row, k]:g} on {_date(timelines.times[row])} outside its "
                             f"range {low:g} to {high:g}")
    if any(name not in model.range_of for name in model.covariates):
        usable = model.usable_covariate_rows(covariates)
        if not usable.all():
            for case, row in first_row_per_case(~usable).items():
                values = ", ".join(f"{name} = {v:g}" for name, v in zip(model.covariates, covariates[row]))
                reasons[case] = (f"numerical failure: the covariates on {_date(timelines.times[row])} ({values}) make "
                                 "a transition rate overflow")
    first = timelines.first_index
    first_allowed = effective_allowed_stages(model, timelines.allowed_stages[first])
    never_first = ~(first_allowed & (np.asarray(model.initial) > 0)).any(axis=1)
    for case in np.flatnonzero(never_first & (reasons == "")).tolist():
        stages = "|".join(np.asarray(model.stages)[first_allowed[case]])
        reasons[case] = (f"impossible under the current model: the first contact "
                         f"({_date(timelines.times[first[case]])}) records {stages}, where the model never starts "
                         "a case (initial probability 0)")
    entry_of = contacts_after_absorbing_entry(model, timelines.offsets, timelines.allowed_stages)
    if (entry_of >= 0).any():
        for case, row in first_row_per_case(entry_of >= 0).items():
            entry = int(entry_of[row])
            stage = model.stages[int(np.argmax(timelines.allowed_stages[entry]))]
            reasons[case] = ContradictoryContact("", int(timelines.times[row]), int(timelines.times[entry]), stage,
                                                 row, entry).reason
    return reasons
