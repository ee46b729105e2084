"""In-memory stand-in caseload for GUI tests (not part of the product).

Builds a Caseload-like object with hmm.simulate + caseview.scoring.score_loaded, and a source
with the interface of caseview.gui.data_source.WorkspaceSource (no database).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from caseview.followup import assess_scores
from caseview.gui.data_source import LoadedCaseload
from caseview.dates import to_day
from caseview.scoring import score_loaded

AS_OF = dt.date(2026, 11, 30)


@dataclass(frozen=True)
class FakeCaseload:
    case_ids: np.ndarray
    coordinators: np.ndarray
    contact_days: np.ndarray
    timelines: object
    raw_values: dict


def make_caseload(model, n_cases: int, rng: np.random.Generator, as_of: dt.date = AS_OF) -> FakeCaseload:
    """Simulated contacts every 14-112 days over the year before ``as_of``."""
    from hmm.simulate import simulate_caseload

    end = to_day(as_of)
    n_contacts = rng.integers(2, 12, size=n_cases)
    gaps = [rng.integers(14, 112, size=k).astype(float) for k in n_contacts]
    starts = end - rng.integers(60, 700, size=n_cases)
    times = [s + np.concatenate([[0.0], np.cumsum(g[1:])]).astype(float) for s, g in zip(starts, gaps)]
    times = [t[t <= end] for t in times]  # the first contact is always before the as-of date
    covariates = np.column_stack([rng.integers(0, 2, size=n_cases), rng.random(n_cases) < 0.3]).astype(float)
    covariates = covariates[:, :model.n_covariates]
    sim = simulate_caseload(model, times, covariates, rng, missing_probability=0.15)
    timelines = sim.timelines
    raw = {}
    for j, channel in enumerate(model.channels):
        codes = timelines.observations[:, j]
        labels = np.array(list(channel.categories) + [""], dtype=object)
        raw[channel.name] = labels[np.where(codes < 0, len(channel.categories), codes)]
    case_ids = np.array([f"HS-{i + 1:06d}" for i in range(timelines.n_cases)], dtype=object)
    coordinators = np.array([f"C{k}" for k in rng.integers(1, 5, size=timelines.n_cases)], dtype=object)
    return FakeCaseload(case_ids, coordinators, timelines.times.astype(np.int64), timelines, raw)


class MemorySource:
    """Source for the window: scores and assesses an in-memory caseload (no workspace)."""

    def __init__(self, model, caseload, label="stand-in caseload"):
        self.model = model
        self.caseload = caseload
        self.label = label
        self.warnings = []
        self.loads = 0
        self.include_closed = False  # the window's "Show closed" filter (WorkspaceSource has it too)

    def workspace(self):
        return None

    def current_model(self):
        return self.model

    def load(self, as_of, horizon_days, callback=None) -> LoadedCaseload:
        self.loads += 1
        scores = score_loaded(self.caseload, self.model, to_day(as_of), horizon_days, callback=callback)
        # flags with default rules, reasons later: what WorkspaceSource gives, without the database
        return LoadedCaseload(scores, assess_scores(scores, explain_reasons=False), ["stand-in caseload (tests)"])

    def close(self):
        pass
