"""The report's model summary reads the fit summary the fit actually stores (built by fitting, never by hand)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fitting"))

from fitting_helpers import simulate, three_stage_model  # noqa: E402


@pytest.fixture(scope="module")
def fitted_version():
    from caseview.modelfile import dump_model
    from caseview.storage.workspace import ModelVersion
    from hmm.fitting import fit_model

    model = three_stage_model()
    timelines = simulate(model, np.random.default_rng(20261203), n_cases=200, n_contacts=8).timelines
    result = fit_model(model, timelines, starts=1, intervals="wald")
    stored = json.loads(json.dumps(result.to_summary().to_dict(), allow_nan=False))   # as the workspace keeps it
    return result, ModelVersion(7, "2026-12-03T09:00:00Z", "fitted", dump_model(result.model), stored, True)


def test_report_shows_the_fitted_intervals_for_time_in_stage(fitted_version):
    from caseview.reports.model_summary import summarise_model

    result, version = fitted_version
    summary = summarise_model(result.model, version)
    by_stage = {row.stage: row for row in summary.time_in_stage}
    fitted = {e.stage: e for e in result.mean_time_in_stage}
    for stage in ("Well", "Unwell"):
        assert by_stage[stage].mean == pytest.approx(fitted[stage].estimate)
        assert by_stage[stage].lower == pytest.approx(fitted[stage].lower)
        assert by_stage[stage].upper == pytest.approx(fitted[stage].upper)
    assert by_stage["Gone"].mean is None          # absorbing
    assert "Wald" in summary.time_in_stage_source and "fitted to this caseload" in summary.time_in_stage_source
    labels = dict(summary.statistics)
    assert labels["cases"] == "200" and labels["converged"] == "yes"


def test_window_sentences_and_report_read_time_in_stage_alike(fitted_version):
    """One reader (FitSummary.from_dict): the stored JSON and the FitSummary itself give the report's rows."""
    from caseview.reports.model_sentences import time_in_stage
    from caseview.reports.model_summary import summarise_model

    result, version = fitted_version
    report = [(r.stage, r.mean, r.lower, r.upper) for r in summarise_model(result.model, version).time_in_stage]
    for given in (version.fit_summary, result.to_summary()):
        rows = [(r.stage, r.mean, r.lower, r.upper) for r in time_in_stage(result.model, given)]
        assert rows == report


def test_unscheduled_rates_read_from_a_fit_summary_object_or_its_json(fitted_version):
    from caseview.reports.model_summary import unscheduled_contacts_per_year

    result, version = fitted_version
    assert unscheduled_contacts_per_year(result.model, version.fit_summary) == \
        unscheduled_contacts_per_year(result.model, result.to_summary())
