"""Unscheduled contacts per year in each stage: from a real fit's summary into the report rows."""

from __future__ import annotations

import json

import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fitting"))
from fitting_helpers import three_stage_model  # noqa: E402

from caseview.reports.model_summary import summarise_model, unscheduled_contacts_per_year  # noqa: E402
from hmm.fitting import fit_model  # noqa: E402
from hmm.model import UnscheduledContacts  # noqa: E402
from hmm.simulate import simulate_caseload  # noqa: E402


def test_fitted_rates_per_year_reach_the_report(rng):
    model = replace(three_stage_model(), unscheduled_contacts=UnscheduledContacts(np.array([0.005, 0.02, 0.0])))
    schedule = [np.arange(0.0, 500.0, 70.0) for _ in range(80)]
    sim = simulate_caseload(model, schedule, rng.integers(0, 2, size=(80, 1)).astype(float), rng)
    result = fit_model(model, sim.timelines, starts=1)
    summary = result.to_summary()
    from caseview.modelfile import dump_model
    from caseview.storage.workspace import ModelVersion

    stored = json.loads(json.dumps(summary.to_dict(), allow_nan=False))   # as the workspace keeps it
    version = ModelVersion(7, "2026-12-03T10:00:00Z", "fitted", dump_model(result.model), stored, True)
    rows = unscheduled_contacts_per_year(result.model, summary)
    assert [r.stage for r in rows] == ["Well", "Unwell", "Gone"]
    unwell = rows[1]
    assert unwell.per_year == pytest.approx(result.model.unscheduled_contacts.rates[1] * 365.25)
    assert unwell.lower < unwell.per_year < unwell.upper
    assert rows[2].per_year == 0.0 and rows[2].lower is None   # a structural zero has no interval
    assert summarise_model(result.model, version).unscheduled_per_year == rows
    # not fitted: the model's own rates, no intervals; no block: nothing
    assert unscheduled_contacts_per_year(model, None)[0].per_year == pytest.approx(0.005 * 365.25)
    assert unscheduled_contacts_per_year(three_stage_model(), summary) == []
