"""Slow simulation study (not in CI): transition rates with and without the timing model when timing is informative.

Caseloads are simulated with scheduled reviews every 8-16 weeks and unscheduled contacts whose rate depends
on the hidden stage (10 times more often when Unwell), dated in whole days as a service records them.
Each caseload is fitted twice from the same start:
with the ``unscheduled_contacts`` block (observation ending on day 720) and timing-blind. For each
transition rate the table gives the relative bias of the estimates and the coverage of the 95% intervals.

Run:  CASEVIEW_STUDY_REPLICATES=40 pytest -m slow tests/fitting/test_timing_study.py -s --timeout=0
"""

from __future__ import annotations

import os
import time
from dataclasses import replace

import numpy as np
import pytest
from fitting_helpers import three_stage_model

from hmm.fitting import fit_model
from hmm import Timelines
from hmm.model import UnscheduledContacts
from hmm.simulate import simulate_caseload

SPAN = 720.0
CONTACT_RATES = np.array([0.003, 0.03, 0.0])   # per day: about 1 a year when Well, 11 a year when Unwell


def reviews(rng, n_cases):
    out = []
    for _ in range(n_cases):
        times = np.concatenate([[0.0], np.cumsum(rng.integers(56, 113, size=20).astype(float))])
        out.append(times[times <= SPAN])
    return out


def whole_days(timelines: Timelines, exact_entry: np.ndarray) -> Timelines:
    """Contact times as whole days, as recorded (an exact entry on the day after it happened); a second
    contact of a case on the same day is left out (one row per case and day, as in a workspace)."""
    times = np.where(exact_entry, np.ceil(timelines.times), np.floor(timelines.times))
    case = timelines.case_of_contact
    keep = np.ones(times.size, dtype=bool)
    keep[1:] = ~((case[1:] == case[:-1]) & (times[1:] <= times[:-1]))
    times = np.where(exact_entry & ~keep, times + 1, times)   # an entry is never dropped: moved a day on
    keep |= exact_entry
    rows = np.flatnonzero(keep)
    counts = np.bincount(case[rows], minlength=timelines.n_cases)
    return Timelines(np.concatenate([[0], np.cumsum(counts)]).astype(np.int64), times[rows],
                     timelines.observations[rows], timelines.allowed_stages[rows], timelines.covariates[rows],
                     timelines.unscheduled[rows])


def one_replicate(truth, rng, n_cases):
    covariates = rng.integers(0, 2, size=(n_cases, 1)).astype(float)
    sim = simulate_caseload(truth, reviews(rng, n_cases), covariates, rng, missing_probability=0.1,
                            end_times=np.full(n_cases, SPAN))
    sim = replace(sim, timelines=whole_days(sim.timelines, sim.exact_entry_contact))
    start = replace(truth, unscheduled_contacts=replace(truth.unscheduled_contacts, rates=np.array([0.01, 0.01, 0.0])))
    start = start.with_rates({("Well", "Unwell"): 0.02, ("Unwell", "Well"): 0.01, ("Unwell", "Gone"): 0.002})
    timing = fit_model(start, sim.timelines, starts=1, observed_until=SPAN)
    blind = fit_model(replace(start, unscheduled_contacts=None), sim.timelines, starts=1)
    return timing, blind


@pytest.mark.slow
def test_transition_rates_with_and_without_the_timing_model(seed):
    replicates = int(os.environ.get("CASEVIEW_STUDY_REPLICATES", "40"))
    budget = float(os.environ.get("CASEVIEW_STUDY_SECONDS", "1500"))
    truth = replace(three_stage_model(), unscheduled_contacts=UnscheduledContacts(CONTACT_RATES.copy()))
    names = [f"rate {truth.stages[t.source]} -> {truth.stages[t.target]} (per day)" for t in truth.transitions]
    true_rates = {n: t.rate for n, t in zip(names, truth.transitions)}
    rng = np.random.default_rng(seed)
    results = {"timing": {n: [] for n in names}, "blind": {n: [] for n in names}}
    began, done = time.monotonic(), 0
    for _ in range(replicates):
        for label, fit in zip(("timing", "blind"), one_replicate(truth, rng, n_cases=300)):
            by_name = {p.name: p for p in fit.parameters}
            for n in names:
                p = by_name[n]
                results[label][n].append((p.estimate, p.lower, p.upper))
        done += 1
        if time.monotonic() - began > budget:
            break
    lines = [f"{done} simulated caseloads of 300 cases (seed {seed}); relative bias of the mean estimate and "
             "coverage of the 95% intervals",
             f"{'transition':<28} {'true':>8}  {'timing: bias':>12} {'coverage':>9}  "
             f"{'blind: bias':>12} {'coverage':>9}"]
    coverage_timing = []
    for n in names:
        row = f"{n.replace(' (per day)', ''):<28} {true_rates[n]:>8.4f}"
        for label in ("timing", "blind"):
            values = np.array([(e, lo if lo is not None else np.nan, hi if hi is not None else np.nan)
                               for e, lo, hi in results[label][n]])
            bias = values[:, 0].mean() / true_rates[n] - 1.0
            covered = np.nanmean((values[:, 1] <= true_rates[n]) & (true_rates[n] <= values[:, 2]))
            row += f"  {bias:>+12.1%} {covered:>9.0%}"
            if label == "timing":
                coverage_timing.append(covered)
        lines.append(row)
    print("\n" + "\n".join(lines))
    # with the correct (timing) model the intervals should cover roughly 95% (binomial noise on `done` runs)
    assert min(coverage_timing) > 0.95 - 3 * np.sqrt(0.95 * 0.05 / done) - 0.05
