"""The caseload as the engine sees it: stored contacts turned into ``hmm.Timelines``."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hmm import StageModel, Timelines

from .contacts import (allowed_stages_for_model, covariates_for_model, fetch_case_contacts, fetch_contacts,
                       observation_codes_for_model)


@dataclass(frozen=True)
class Caseload:
    """Every case's contacts, coded for one model.

    Attributes
    ----------
    case_ids : ndarray of object, shape (n_cases,)
        Pseudonymous case codes, sorted.
    coordinators : ndarray of object, shape (n_cases,)
        Last recorded coordinator of each case ('' if none), within the selection.
    contact_days : ndarray of int64, shape (n_contacts,)
        Days since 1970-01-01, in the row order of ``timelines``.
    timelines : hmm.Timelines
        ``times`` = contact days as float; observations in the model's category order;
        covariates in the model's order; ``allowed_stages`` from the known stage ('A|B').
    raw_values : dict[str, ndarray of object, shape (n_contacts,)]
        Recorded text per model channel ('' = blank).
    """

    case_ids: np.ndarray
    coordinators: np.ndarray
    contact_days: np.ndarray
    timelines: Timelines
    raw_values: dict

    @property
    def n_cases(self) -> int:
        return int(self.case_ids.shape[0])


def load_caseload(connection, model: StageModel, as_of_day: int | None = None) -> Caseload:
    """Load the caseload for ``model``; with ``as_of_day`` only contacts on or before that day.

    Cases whose first contact is after ``as_of_day`` are left out (they have no contacts kept).
    """
    stored = fetch_contacts(connection, as_of_day)
    observations, raw = observation_codes_for_model(stored, model)
    timelines = Timelines(
        offsets=stored.offsets,
        times=stored.days.astype(np.float64),
        observations=observations,
        allowed_stages=allowed_stages_for_model(stored.stage_known, model),
        covariates=covariates_for_model(stored, model),
        # contact_kind: only carried when some contact is unscheduled (None = all scheduled)
        unscheduled=stored.unscheduled if stored.unscheduled is not None and stored.unscheduled.any() else None,
    )
    return Caseload(case_ids=stored.case_codes, coordinators=stored.case_coordinator,
                    contact_days=stored.days, timelines=timelines, raw_values=raw)


def load_case(connection, model: StageModel, case_code: str, as_of_day: int | None = None) -> Caseload:
    """One case's current contacts (optionally up to ``as_of_day``) coded for ``model``.

    Reads only that case's rows through the primary key, so the cost does not grow with the
    caseload (the window rescores one case after recording a contact). No contacts: zero cases.
    """
    stored = fetch_case_contacts(connection, case_code, as_of_day)
    observations, raw = observation_codes_for_model(stored, model)
    timelines = Timelines(offsets=stored.offsets, times=stored.days.astype(np.float64), observations=observations,
                          allowed_stages=allowed_stages_for_model(stored.stage_known, model),
                          covariates=covariates_for_model(stored, model),
                          # as load_caseload: the kinds only when some contact is unscheduled
                          unscheduled=stored.unscheduled if stored.unscheduled is not None
                          and stored.unscheduled.any() else None)
    return Caseload(case_ids=stored.case_codes, coordinators=stored.case_coordinator,
                    contact_days=stored.days, timelines=timelines, raw_values=raw)


def subset_caseload(caseload: Caseload, keep: np.ndarray) -> Caseload:
    """The cases where ``keep`` (bool, shape (n_cases,)) is True, in the same order."""
    keep = np.asarray(keep, dtype=bool)
    if keep.all():
        return caseload
    cases = np.flatnonzero(keep)
    offsets = caseload.timelines.offsets
    counts = offsets[1:] - offsets[:-1]
    rows = np.repeat(keep, counts)
    return Caseload(case_ids=caseload.case_ids[cases], coordinators=caseload.coordinators[cases],
                    contact_days=caseload.contact_days[rows], timelines=caseload.timelines.subset(cases),
                    raw_values={k: v[rows] for k, v in caseload.raw_values.items()})
