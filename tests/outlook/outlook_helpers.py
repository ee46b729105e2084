"""Helpers for the outlook tests: a simulated caseload scored without a database."""

from __future__ import annotations

import datetime as dt
from types import SimpleNamespace

import numpy as np

from caseview.dates import to_day

from caseview.scoring import score_loaded
from hmm.simulate import simulate_caseload

AS_OF = dt.date(2026, 11, 30)


def scored_caseload(model, n_cases: int, rng: np.random.Generator, exact_entry: bool = True):
    """``n_cases`` simulated cases (demo structure), first contacts over a year, scored as of AS_OF."""
    end = to_day(AS_OF)
    first = end - rng.integers(30, 400, n_cases)
    contact_times = [np.arange(f, end + 1, rng.integers(25, 90)).astype(float) for f in first]
    covariates = np.column_stack([rng.integers(0, 2, n_cases), rng.integers(0, 2, n_cases)]).astype(float)
    sim = simulate_caseload(model, contact_times, covariates, rng, missing_probability=0.2, exact_entry=exact_entry)
    n = sim.timelines.n_cases
    caseload = SimpleNamespace(timelines=sim.timelines,
                               case_ids=np.array([f"HS-{i:04d}" for i in range(n)], dtype=object),
                               coordinators=np.array([f"C{i % 3 + 1}" for i in range(n)], dtype=object))
    return score_loaded(caseload, model, end, 90.0)

