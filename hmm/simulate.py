"""Simulate stage processes exactly (Gillespie) and observe them at irregular contacts.

Randomness always comes from an explicit ``numpy.random.Generator``. The caseload simulator
steps all cases together: a loop over contact position, and inside it a loop over jumps where
each iteration moves every case that still has a jump before its next contact.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .exact_entry import exact_entry_stage_mask
from .model import StageModel
from .timelines import MISSING, Timelines
from .transition import covariate_groups

__all__ = ["simulate_path", "simulate_caseload", "regular_contacts", "SimulatedCaseload"]


def simulate_path(generator, start_stage: int, duration: float, rng: np.random.Generator) -> tuple:
    """One exact continuous-time path (Gillespie's direct method).

    Parameters
    ----------
    generator : ndarray, shape (S, S)
    start_stage : int
    duration : float
        Days to simulate.
    rng : numpy.random.Generator

    Returns
    -------
    jump_times : ndarray, shape (J + 1,)
        0 followed by the time of every jump within ``[0, duration]``.
    stages : ndarray of int64, shape (J + 1,)
        Stage entered at each of those times (``stages[0] == start_stage``).
    """
    q = np.asarray(generator, dtype=float)
    times, stages = [0.0], [int(start_stage)]
    t, s = 0.0, int(start_stage)
    while True:
        rate = -q[s, s]
        if rate <= 0:
            break
        t += rng.exponential(1.0 / rate)
        if t > duration:
            break
        weights = np.where(np.arange(q.shape[0]) == s, 0.0, np.maximum(q[s], 0.0))
        s = int(rng.choice(q.shape[0], p=weights / weights.sum()))
        times.append(t)
        stages.append(s)
    return np.array(times), np.array(stages, dtype=np.int64)


@dataclass(frozen=True)
class SimulatedCaseload:
    """A simulated caseload and the truth behind it.

    Attributes
    ----------
    timelines : Timelines
    true_stages : ndarray of int64, shape (n_contacts,)
        The stage each case was really in at each recorded contact.
    case_of_contact : ndarray of int64, shape (n_contacts,)
    exact_entry_contact : ndarray of bool, shape (n_contacts,)
        True for contacts that record the exact date of entry into an exact-entry stage.
    """

    timelines: Timelines
    true_stages: np.ndarray
    case_of_contact: np.ndarray
    exact_entry_contact: np.ndarray


def regular_contacts(n_cases: int, n_contacts: int, gap: float, start: float = 0.0) -> list:
    """Contact times ``start, start + gap, ...`` for every case.

    Returns
    -------
    list of ndarray, each shape (n_contacts,)
    """
    times = start + gap * np.arange(n_contacts, dtype=float)
    return [times.copy() for _ in range(n_cases)]


def _draw_categories(cdf_rows: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Inverse-CDF draw per row; ``cdf_rows`` shape (n, C)."""
    u = rng.random(cdf_rows.shape[0])
    return np.minimum((u[:, None] >= cdf_rows).sum(axis=1), cdf_rows.shape[1] - 1)


def simulate_caseload(model: StageModel, contact_times, covariates, rng: np.random.Generator,
                      missing_probability=0.0, exact_entry: bool = True, end_times=None) -> SimulatedCaseload:
    """Simulate every case's hidden stage path and the evidence recorded at its contacts.

    Parameters
    ----------
    model : StageModel
    contact_times : list of ndarray
        Per case, sorted contact days (at least one each).
    covariates : list of ndarray, each shape (n_contacts_i, n_covariates), or ndarray (n_cases, n_covariates)
        Covariates recorded at each contact (a 2-D array gives each case constant covariates).
    rng : numpy.random.Generator
    missing_probability : float or ndarray, shape (n_channels,)
        Chance that a channel is not recorded at a contact (recorded as ``MISSING``).
    exact_entry : bool
        If True and a path enters one of ``model.exact_entry_stages`` before the next scheduled
        contact, one contact is recorded at that entry time (allowed stages = only that stage,
        all channels missing, covariates of the previous contact) and the case's timeline stops.
    end_times : ndarray, shape (n_cases,), optional
        With ``model.unscheduled_contacts``: unscheduled contacts are simulated up to this day for
        each case (default: its last scheduled contact). Ignored without the block.

    Returns
    -------
    SimulatedCaseload
        Start stage drawn from ``model.initial`` at the first contact; between contacts ``j`` and
        ``j + 1`` the chain runs with the generator of contact ``j``'s covariates. With
        ``model.unscheduled_contacts`` the ``contact_times`` are the *scheduled* contacts (the
        schedule is the caller's choice); unscheduled contacts arrive in between at the rate of the
        current stage (competing with the stage's jumps, exactly), carry the covariates of the
        contact before them, and are marked in ``timelines.unscheduled``.
    """
    layout = _contact_layout(model, contact_times, covariates)
    timing = model.unscheduled_contacts is not None
    if timing and end_times is not None:
        layout = _with_end_stops(layout, end_times)
    paths = _simulate_paths(model, layout, rng, timing, exact_entry)
    return _recorded_caseload(model, layout, paths, rng, missing_probability, timing)


@dataclass
class _ContactLayout:
    """The contacts to simulate at, flat and case-ordered (n contacts over all cases)."""

    counts: np.ndarray      # (n_cases,) contacts per case
    offsets: np.ndarray     # (n_cases + 1,)
    times: np.ndarray       # (n,)
    covariates: np.ndarray  # (n, n_covariates)
    case_of: np.ndarray     # (n,)
    virtual: np.ndarray     # (n,) bool: an unrecorded stop at a case's end (not a contact)


@dataclass
class _Paths:
    """Where each case's path was at each contact, and what happened between contacts."""

    order: np.ndarray        # (n_cases,) cases by decreasing number of contacts (the stepping order)
    true_stage: np.ndarray   # (n,) stage at each contact (-1 after an exact entry stopped the case)
    recorded: np.ndarray     # (n,) bool: the contact happened (the case had not stopped)
    stopped: np.ndarray      # (n_cases,) bool, by position in ``order``: entered an exact-entry stage
    entry_time: np.ndarray   # (n_cases,) by position: when
    entry_stage: np.ndarray  # (n_cases,) by position: which stage
    entry_row: np.ndarray    # (n_cases,) by position: the contact before the entry
    extra: dict              # unscheduled contacts: lists of arrays "case", "time", "stage", "row"


def _contact_layout(model: StageModel, contact_times, covariates) -> _ContactLayout:
    """Check the schedule and lay the contacts out flat, with the covariates of each."""
    counts = np.array([len(t) for t in contact_times], dtype=np.int64)
    if counts.size == 0 or counts.min() < 1:
        raise ValueError("every case needs at least one contact time")
    offsets = np.concatenate([[0], np.cumsum(counts)])
    times = np.concatenate([np.asarray(t, dtype=float) for t in contact_times])
    n_cases, n_flat = counts.size, times.size
    if isinstance(covariates, np.ndarray) and covariates.ndim == 2 and covariates.shape[0] == n_cases \
            and not (n_cases == n_flat):
        cov = np.repeat(covariates.astype(float), counts, axis=0)
    elif isinstance(covariates, np.ndarray) and covariates.ndim == 2 and covariates.shape[0] == n_flat:
        cov = covariates.astype(float)
    else:
        cov = np.concatenate([np.asarray(c, dtype=float).reshape(-1, model.n_covariates) for c in covariates])
    if cov.shape != (n_flat, model.n_covariates):
        raise ValueError(f"covariates must give {model.n_covariates} values at each of {n_flat} contacts")
    case_of = np.repeat(np.arange(n_cases), counts)
    if n_flat > 1 and np.any((np.diff(times) < 0) & (case_of[1:] == case_of[:-1])):
        raise ValueError("contact times must be sorted within each case")
    return _ContactLayout(counts, offsets, times, cov, case_of, np.zeros(n_flat, dtype=bool))


def _with_end_stops(layout: _ContactLayout, end_times) -> _ContactLayout:
    """One unrecorded stop at each case's end (where it is after the last scheduled contact)."""
    n_cases = layout.counts.size
    end = np.broadcast_to(np.asarray(end_times, dtype=float), (n_cases,))
    last = layout.offsets[1:] - 1
    extend = end > layout.times[last]
    insert_at = layout.offsets[1:][extend]
    times = np.insert(layout.times, insert_at, end[extend])
    cov = np.insert(layout.covariates, insert_at, layout.covariates[last[extend]], axis=0)
    virtual = np.insert(layout.virtual, insert_at, True)
    counts = layout.counts + extend
    offsets = np.concatenate([[0], np.cumsum(counts)])
    return _ContactLayout(counts, offsets, times, cov, np.repeat(np.arange(n_cases), counts), virtual)


def _simulate_paths(model: StageModel, layout: _ContactLayout, rng: np.random.Generator, timing: bool,
                    exact_entry: bool) -> _Paths:
    """Run every case's chain from contact to contact, all cases at once (Gillespie steps)."""
    counts, offsets, times = layout.counts, layout.offsets, layout.times
    n_cases, n_flat, n_stages = counts.size, times.size, model.n_stages
    distinct, group = covariate_groups(layout.covariates)
    generators = model.generators(distinct)
    leave_rate = -np.einsum("gss->gs", generators)                      # (G, S)
    jumps = np.clip(generators, 0.0, None)
    jumps[:, np.arange(n_stages), np.arange(n_stages)] = 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        jump_cdf = np.cumsum(jumps, axis=2) / leave_rate[:, :, None]      # (G, S, S)
    contact_rate = model.unscheduled_rates(distinct) if timing else np.zeros_like(leave_rate)  # (G, S)
    extra = {"case": [], "time": [], "stage": [], "row": []}            # unscheduled contacts
    # an entry into an exact-entry stage ends the case's contacts and is recorded as that stage alone on the
    # day it happened: the record hmm.exact_entry reads as an entry
    exact_mask = exact_entry_stage_mask(model) if exact_entry else np.zeros(n_stages, dtype=bool)

    order = np.argsort(-counts, kind="stable")
    starts = offsets[:-1][order]
    true_stage = np.full(n_flat, -1, dtype=np.int64)
    recorded = np.zeros(n_flat, dtype=bool)
    stage = np.zeros(n_cases, dtype=np.int64)                          # indexed by sorted position
    stopped = np.zeros(n_cases, dtype=bool)
    entry_time = np.zeros(n_cases)
    entry_stage = np.zeros(n_cases, dtype=np.int64)
    entry_row = np.zeros(n_cases, dtype=np.int64)

    stage[:] = _draw_categories(np.tile(np.cumsum(model.initial), (n_cases, 1)), rng)
    true_stage[starts] = stage
    recorded[starts] = True
    for k in range(1, int(counts.max())):
        active = np.flatnonzero((counts[order] > k) & ~stopped)
        rows = starts[active] + k
        t, end, g, s = times[rows - 1], times[rows], group[rows - 1], stage[active]
        moving = np.arange(active.size)
        while moving.size:
            rate = leave_rate[g[moving], s[moving]]
            if timing:
                calling = contact_rate[g[moving], s[moving]]
                rate = rate + calling
            with np.errstate(divide="ignore"):
                hold = np.where(rate > 0, rng.standard_exponential(moving.size) / rate, np.inf)
            jumped = t[moving] + hold < end[moving]
            moving = moving[jumped]
            if not moving.size:
                break
            t[moving] += hold[jumped]
            jumping = moving
            if timing:
                # the event is an unscheduled contact with probability lambda_s / (leave rate + lambda_s);
                # the case stays in its stage and goes on to its next event
                called = rng.random(moving.size) * rate[jumped] < calling[jumped]
                who = moving[called]
                extra["case"].append(order[active[who]])
                extra["time"].append(t[who].copy())
                extra["stage"].append(s[who].copy())
                extra["row"].append(rows[who] - 1)
                jumping = moving[~called]
            u = rng.random(jumping.size)
            cdf = jump_cdf[g[jumping], s[jumping]]
            s[jumping] = np.minimum((u[:, None] >= cdf).sum(axis=1), n_stages - 1)
            entered = exact_mask[s[jumping]]
            if entered.any():
                who = jumping[entered]
                stopped[active[who]] = True
                entry_time[active[who]] = t[who]
                entry_stage[active[who]] = s[who]
                entry_row[active[who]] = rows[who] - 1
                moving = moving[~np.isin(moving, who)] if timing else jumping[~entered]
        stage[active] = s
        going_on = ~stopped[active]
        true_stage[rows[going_on]] = s[going_on]
        recorded[rows[going_on]] = True
    return _Paths(order, true_stage, recorded, stopped, entry_time, entry_stage, entry_row, extra)


def _recorded_caseload(model: StageModel, layout: _ContactLayout, paths: _Paths, rng: np.random.Generator,
                       missing_probability, timing: bool) -> SimulatedCaseload:
    """What the contacts record: evidence drawn from each channel's probabilities at the true stage,
    the unscheduled contacts as extra rows, and a contact dating each exact entry."""
    n_cases, n_stages = layout.counts.size, model.n_stages
    case_of, times, cov, true_stage = layout.case_of, layout.times, layout.covariates, paths.true_stage
    extra, order, stopped = paths.extra, paths.order, paths.stopped
    entry_time, entry_stage, entry_row = paths.entry_time, paths.entry_stage, paths.entry_row
    recorded = paths.recorded & ~layout.virtual
    # Evidence at scheduled contacts (and at the unscheduled ones, appended as extra rows).
    n_extra = int(sum(a.size for a in extra["time"]))
    if n_extra:
        first_extra = times.size
        case_of = np.concatenate([case_of] + extra["case"])
        times = np.concatenate([times] + extra["time"])
        true_stage = np.concatenate([true_stage] + extra["stage"])
        cov = np.concatenate([cov, cov[np.concatenate(extra["row"])]])
        recorded = np.concatenate([recorded, np.ones(n_extra, dtype=bool)])
    kept = np.flatnonzero(recorded)
    n_channels = len(model.channels)
    missing = np.broadcast_to(np.asarray(missing_probability, dtype=float), (n_channels,))
    observations = np.full((kept.size, n_channels), MISSING, dtype=np.int16)
    for c, table in enumerate(model.emission_matrices()):
        codes = _draw_categories(np.cumsum(table, axis=1)[true_stage[kept]], rng)
        lost = rng.random(kept.size) < missing[c]
        observations[:, c] = np.where(lost, MISSING, codes)
    allowed = np.ones((kept.size, n_stages), dtype=bool)

    # Exact-entry contacts.
    entries = np.flatnonzero(stopped)
    entry_allowed = np.zeros((entries.size, n_stages), dtype=bool)
    entry_allowed[np.arange(entries.size), entry_stage[entries]] = True
    all_case = np.concatenate([case_of[kept], order[entries]])
    all_times = np.concatenate([times[kept], entry_time[entries]])
    sort = np.lexsort((all_times, all_case))
    case_sorted = all_case[sort]
    per_case = np.bincount(case_sorted, minlength=n_cases)
    unscheduled = None
    if timing:
        unscheduled = np.concatenate([kept >= first_extra if n_extra else np.zeros(kept.size, bool),
                                      np.zeros(entries.size, bool)])[sort]
    timelines = Timelines(
        offsets=np.concatenate([[0], np.cumsum(per_case)]).astype(np.int64),
        times=all_times[sort],
        observations=np.concatenate([observations, np.full((entries.size, n_channels), MISSING, np.int16)])[sort],
        allowed_stages=np.concatenate([allowed, entry_allowed])[sort],
        covariates=np.concatenate([cov[kept], cov[entry_row[entries]]])[sort],
        unscheduled=unscheduled,
    )
    return SimulatedCaseload(
        timelines=timelines,
        true_stages=np.concatenate([true_stage[kept], entry_stage[entries]])[sort],
        case_of_contact=case_sorted,
        exact_entry_contact=np.concatenate([np.zeros(kept.size, bool), np.ones(entries.size, bool)])[sort],
    )
