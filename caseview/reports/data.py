"""Collect everything a report shows into one :class:`ReportData` (no drawing, no files).

The numbers come from the follow-up assessment (:func:`caseview.followup.assess_caseload`),
which scores the caseload with the workspace's current model; this module only selects rows,
counts, compares two dates and computes the caseload's expected stage occupancy over time.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from caseview.errors import InputError

from .deidentify import DateView, withhold_dates
from .model_summary import ModelSummary, summarise_model

if TYPE_CHECKING:
    from caseview.followup.assess import CaseloadAssessment
    from caseview.followup.outlook import Outlook

#: Review statuses that count as "review done" (a supervisor has looked at the flag).
REVIEW_DONE = ("acknowledged", "actioned", "dismissed")

#: Days of history shown in the caseload occupancy chart.
PAST_WINDOW_DAYS = 180


@dataclass(frozen=True)
class Changes:
    """What changed between the previous date and the as-of date (selected cases only).

    Attributes
    ----------
    since : datetime.date
    newly_flagged, no_longer_flagged : list[str]
        Case IDs.
    stage_changes : list[tuple[str, str, str]]
        (case ID, most likely stage then, most likely stage now) for cases scored on both dates.
    new_cases : list[str]
        Cases with no contact by the previous date.
    """

    since: dt.date
    newly_flagged: list
    no_longer_flagged: list
    stage_changes: list
    new_cases: list


@dataclass(frozen=True)
class Occupancy:
    """Mean stage probabilities over the selected cases, past and forecast.

    Attributes
    ----------
    days_from_as_of : ndarray, shape (T,)
        Negative = before the as-of date, 0 = the as-of date, positive = forecast.
    mean_probabilities : ndarray, shape (T, n_stages)
        Mean over the cases with a first contact on or before that day.
    n_cases : ndarray of int, shape (T,)
        Cases averaged at each day.
    """

    days_from_as_of: np.ndarray
    mean_probabilities: np.ndarray
    n_cases: np.ndarray


@dataclass
class ReportData:
    """Everything a report shows. Row arrays index ``assessment.scores`` rows.

    Attributes
    ----------
    rows : ndarray of int, shape (m,)
        Cases in the report's scope (coordinator filter), ordered by priority (contact sooner first).
    listed_rows : ndarray of int
        Cases listed in per-case tables: ``rows``, or only the flagged ones with ``flagged_only``.
    flagged_rows : ndarray of int
        Flagged cases within ``rows``, in priority order.
    stage_counts : ndarray of int, shape (n_stages,)
        Cases in ``rows`` by most likely stage now.
    expected_now, expected_at_horizon : ndarray, shape (n_stages,)
        Expected number of cases in each stage (sum of probabilities).
    """

    assessment: CaseloadAssessment
    as_of: dt.date
    horizon_days: float
    coordinator: str | None
    flagged_only: bool
    dates: DateView
    stages: tuple
    rows: np.ndarray
    listed_rows: np.ndarray
    flagged_rows: np.ndarray
    stage_counts: np.ndarray
    expected_now: np.ndarray
    expected_at_horizon: np.ndarray
    reviews_done: int
    reviews_outstanding: int
    changes: Changes | None
    occupancy: Occupancy
    model: ModelSummary
    audit_head: str
    options: dict = field(default_factory=dict)
    outlook: Outlook | None = None   # reports/outlook_page.py
    outlook_note: str = ""
    not_scored: list = field(default_factory=list)  # [(case_id, coordinator, reason)] in scope, never in figures

    @property
    def scores(self):
        return self.assessment.scores


def collect_report_data(ws, as_of: dt.date, *, horizon_days: float = 90.0, coordinator: str | None = None,
                        flagged_only: bool = False, since: dt.date | None = None, dates: str = "calendar",
                        seed=None, assess=None, callback=None, include_closed: bool = False) -> ReportData:
    """Assess the caseload and gather the report's contents.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    as_of : datetime.date
    horizon_days : float
    coordinator : str, optional
        Only this coordinator's cases (their last recorded coordinator).
    flagged_only : bool
        List only flagged cases in per-case tables (the summary still covers every case in scope).
    since : datetime.date, optional
        Earlier date to compare with ("changes since the last meeting").
    dates : {"calendar", "relative", "shifted"}
        See :mod:`caseview.reports.deidentify`.
    seed : int, optional
        Seed for shifted dates.
    assess : callable, optional
        ``assess(ws, as_of, horizon_days=..., callback=...) -> CaseloadAssessment``; default
        :func:`caseview.followup.assess_caseload`.
    callback : callable(fraction), optional
    """
    if assess is None:
        from caseview.followup import assess_caseload

        def assess(ws, date, horizon_days, callback):
            # reopen=False: making a report never changes review state.
            return assess_caseload(ws, date, horizon_days=horizon_days, callback=callback, reopen=False,
                                   include_closed=include_closed)
    if not np.isfinite(horizon_days) or horizon_days <= 0:
        raise InputError(f"horizon: expected a number of days > 0, got {horizon_days!r}")
    if since is not None and since >= as_of:
        raise InputError(f"changes since: expected a date before the as-of date {as_of.isoformat()}, "
                         f"got {since.isoformat()}")
    progress = callback or (lambda fraction: None)
    progress(0.0)
    assessment = assess(ws, as_of, horizon_days=horizon_days,
                        callback=lambda f: progress(0.5 * f))
    scores = assessment.scores
    if scores.n_cases == 0:
        if scores.unscorable.n_cases:
            raise InputError(f"as of {as_of.isoformat()}: no case can be scored; {scores.unscorable.summary()}")
        raise InputError(f"as of {as_of.isoformat()}: no case has a contact on or before this date")
    coordinators = np.asarray(scores.coordinators, dtype=object)
    in_scope = np.ones(scores.n_cases, dtype=bool)
    if coordinator:
        from caseview.timeline_io.case_ids import match_coordinator_code

        coordinator = match_coordinator_code(coordinator, coordinators,
                                             f"the cases scored on {as_of.isoformat()}")
        in_scope = coordinators == coordinator
    priority = np.asarray(assessment.priority, dtype=float)
    order = np.argsort(-priority, kind="stable")
    rows = order[in_scope[order]]
    flagged = np.asarray(assessment.is_flagged, dtype=bool)
    flagged_rows = rows[flagged[rows]]
    listed_rows = flagged_rows if flagged_only else rows

    n_stages = scores.model.n_stages
    stage_counts = np.bincount(scores.most_likely_stage[rows], minlength=n_stages)
    status = np.asarray(assessment.review_status, dtype=object)[flagged_rows]
    done = int(np.isin(status, REVIEW_DONE).sum())

    changes = None
    if since is not None:
        previous = assess(ws, since, horizon_days=horizon_days, callback=lambda f: progress(0.5 + 0.3 * f))
        changes = compare(assessment, previous, rows, since)
    progress(0.8)
    occupancy = caseload_occupancy(scores, rows)
    progress(0.95)
    model, version = ws.current_model()
    summary = summarise_model(scores.model, version)
    from .outlook_page import collect_outlook

    outlook, outlook_note = collect_outlook(scores, version, as_of, coordinator or None)
    view = DateView(dates, scores.first_contact_day, seed=seed)
    lost = scores.unscorable
    not_scored = [(str(c), str(k or ""), withhold_dates(str(r)) if view.deidentified else str(r))
                  for c, k, r in zip(lost.case_ids, lost.coordinators, lost.reasons)
                  if not coordinator or k == coordinator]
    return ReportData(
        assessment=assessment, as_of=as_of, horizon_days=float(horizon_days), coordinator=coordinator or None,
        flagged_only=flagged_only, dates=view, stages=tuple(scores.model.stages), rows=rows,
        listed_rows=listed_rows, flagged_rows=flagged_rows, stage_counts=stage_counts,
        expected_now=scores.p_now[rows].sum(axis=0), expected_at_horizon=scores.p_at_horizon[rows].sum(axis=0),
        reviews_done=done, reviews_outstanding=int(flagged_rows.size - done), changes=changes,
        occupancy=occupancy, model=summary, audit_head=ws.audit_head(),
        options={"horizon_days": float(horizon_days), "coordinator": coordinator or None,
                 "flagged_only": bool(flagged_only), "since": since.isoformat() if since else None,
                 "dates": dates, "seed": "given" if seed is not None else None,
                 "include_closed": bool(include_closed)},
        outlook=outlook, outlook_note=outlook_note, not_scored=not_scored,
    )


def compare(now, previous, rows: np.ndarray, since: dt.date) -> Changes:
    """Flags and most likely stages of the cases in ``rows`` now versus an earlier assessment."""
    stages = now.scores.model.stages
    then_row = {cid: i for i, cid in enumerate(previous.scores.case_ids)}
    newly, gone, moved, new_cases = [], [], [], []
    for r in rows:
        cid = now.scores.case_ids[r]
        p = then_row.get(cid)
        flagged_now = bool(now.is_flagged[r])
        if p is None:
            new_cases.append(str(cid))
            if flagged_now:
                newly.append(str(cid))
            continue
        flagged_then = bool(previous.is_flagged[p])
        if flagged_now and not flagged_then:
            newly.append(str(cid))
        elif flagged_then and not flagged_now:
            gone.append(str(cid))
        a, b = int(previous.scores.most_likely_stage[p]), int(now.scores.most_likely_stage[r])
        if a != b:
            moved.append((str(cid), stages[a], stages[b]))
    return Changes(since, sorted(newly), sorted(gone), sorted(moved), sorted(new_cases))


#: Cases per block in :func:`caseload_occupancy` (about 40 MB of transition matrices per block).
OCCUPANCY_BLOCK_CASES = 10_000


def caseload_occupancy(scores, rows: np.ndarray, past_days: int = PAST_WINDOW_DAYS, n_points: int = 40) -> Occupancy:
    """Mean stage probabilities of the selected cases before the as-of date and forecast to the horizon.

    A past day ``d`` uses each case's filtered distribution at its last contact on or before ``d``,
    propagated to ``d`` - what would have been estimated on that day (the same rule as
    :func:`hmm.forecasting.stage_probabilities_now`). One forward pass serves every day.
    The forecast uses :func:`hmm.forecasting.occupancy_over_time` from ``p_now``.
    """
    from hmm.forecasting import occupancy_over_time
    from hmm.inference import forward
    from hmm.transition import transition_matrices

    model = scores.model
    timelines = scores.timelines.subset(rows)
    filtered = forward(model, timelines).filtered
    as_of = int(scores.as_of_day)
    past = np.unique(np.linspace(-past_days, 0, n_points // 2 + 1).round().astype(int))
    ahead = np.unique(np.linspace(0, scores.horizon_days, n_points // 2 + 1).round().astype(int))[1:]
    days = as_of + past.astype(float)
    # Last contact on or before each day, for every (case, day): search a (case, time) key.
    case_of = timelines.case_of_contact
    span = float(max(timelines.times.max(), as_of) - timelines.times.min() + past_days + 10)
    origin = float(timelines.times.min() - past_days - 5)
    keys = case_of * span + (timelines.times - origin)
    n, t = timelines.n_cases, days.size
    distinct, group = np.unique(timelines.covariates, axis=0, return_inverse=True)
    generators, group = model.generators(distinct), group.reshape(-1)
    counts = np.zeros(t, dtype=np.int64)
    sums = np.zeros((t, model.n_stages))
    # cases in blocks, so the (case, day) transition matrices never all exist at once (memory stays flat)
    for first in range(0, n, OCCUPANCY_BLOCK_CASES):
        cases = np.arange(first, min(n, first + OCCUPANCY_BLOCK_CASES))
        wanted = (cases[:, None] * span + (days[None, :] - origin)).ravel()
        last_row = np.searchsorted(keys, wanted, side="right") - 1
        started = last_row >= timelines.offsets[:-1][np.repeat(cases, t)]
        last_row = np.where(started, last_row, 0)
        gaps = np.where(started, np.tile(days, cases.size) - timelines.times[last_row], 0.0)
        steps = transition_matrices(generators, gaps, group[last_row])
        p_past = np.einsum("ms,mst->mt", filtered[last_row], steps) * started[:, None]
        counts += started.reshape(cases.size, t).sum(axis=0)
        sums += p_past.reshape(cases.size, t, model.n_stages).sum(axis=0)
    mean_past = sums / np.maximum(counts, 1)[:, None]
    future = occupancy_over_time(model, scores.p_now[rows], scores.last_covariates[rows], ahead.astype(float))
    mean_future = future.mean(axis=0)
    return Occupancy(
        days_from_as_of=np.concatenate([past, ahead]).astype(float),
        mean_probabilities=np.vstack([mean_past, mean_future]),
        n_cases=np.concatenate([counts, np.full(ahead.size, rows.size)]),
    )


def case_history(scores, rows: np.ndarray, n_points: int = 60) -> list:
    """Smoothed stage probabilities at each contact and the projection from the last contact.

    Parameters
    ----------
    scores : CaseloadScores
    rows : ndarray of int, shape (m,)
        Cases to chart.

    Returns
    -------
    list of dict, one per case: ``contact_days`` (k,), ``smoothed`` (k, S), ``projection_days`` (P,),
    ``projection`` (P, S) from the last contact to the horizon (no new evidence).
    """
    from hmm.forecasting import occupancy_over_time
    from hmm.inference import smoothed_probabilities

    if len(rows) == 0:
        return []
    model = scores.model
    timelines = scores.timelines.subset(np.asarray(rows))
    smoothed = smoothed_probabilities(model, timelines)
    last = timelines.last_index
    end = scores.as_of_day + scores.horizon_days
    gap_to_end = end - timelines.times[last]
    steps = np.linspace(0.0, 1.0, n_points)
    offsets = np.unique(np.concatenate([steps * gap_to_end.max(), scores.as_of_day - timelines.times[last]]))
    projection = occupancy_over_time(model, smoothed[last], timelines.covariates[last], offsets)
    out = []
    for i in range(timelines.n_cases):
        part = slice(timelines.offsets[i], timelines.offsets[i + 1])
        keep = offsets <= gap_to_end[i] + 1e-9
        out.append({
            "contact_days": timelines.times[part].copy(),
            "smoothed": smoothed[part],
            "projection_days": timelines.times[last[i]] + offsets[keep],
            "projection": projection[i, keep],
        })
    return out
