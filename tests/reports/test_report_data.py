"""ReportData: caseload occupancy over time, changes since a date, counts, model summary."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from reports_helpers import AS_OF, SINCE


@pytest.fixture(scope="module")
def data(report_workspace):
    from caseview.reports.data import collect_report_data
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        return collect_report_data(ws, AS_OF, horizon_days=90.0, since=SINCE)


def test_past_occupancy_matches_scoring_on_that_day(report_workspace, data):
    """A past point of the chart is the mean of what scoring on that day gives (same cases)."""
    from caseview.scoring import score_caseload
    from caseview.storage import Workspace

    occupancy = data.occupancy
    past = np.flatnonzero(occupancy.days_from_as_of < 0)
    picks = [past[0], past[len(past) // 2]]
    with Workspace.open(report_workspace) as ws:
        for i in picks:
            day = AS_OF + dt.timedelta(days=int(occupancy.days_from_as_of[i]))
            then = score_caseload(ws, day, 90.0)
            assert occupancy.n_cases[i] == then.n_cases
            np.testing.assert_allclose(occupancy.mean_probabilities[i], then.p_now.mean(axis=0), atol=1e-10)


def test_occupancy_in_small_blocks_is_the_same(data, monkeypatch):
    """Blocks of cases only bound the memory: the chart is the same with blocks of 7 cases."""
    from caseview.reports import data as report_data

    rows = np.arange(data.scores.n_cases)
    whole = report_data.caseload_occupancy(data.scores, rows)
    monkeypatch.setattr(report_data, "OCCUPANCY_BLOCK_CASES", 7)
    blocked = report_data.caseload_occupancy(data.scores, rows)
    np.testing.assert_allclose(blocked.mean_probabilities, whole.mean_probabilities, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(blocked.n_cases, whole.n_cases)


def test_occupancy_at_as_of_and_horizon_match_scores(data):
    o, s = data.occupancy, data.scores
    now = int(np.flatnonzero(o.days_from_as_of == 0)[0])
    np.testing.assert_allclose(o.mean_probabilities[now], s.p_now.mean(axis=0), atol=1e-10)
    assert o.days_from_as_of[-1] == 90
    np.testing.assert_allclose(o.mean_probabilities[-1], s.p_at_horizon.mean(axis=0), atol=1e-10)
    np.testing.assert_allclose(o.mean_probabilities.sum(axis=1), 1.0, atol=1e-9)


def test_changes_since_match_two_independent_assessments(report_workspace, data):
    from caseview.followup import assess_caseload
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        now = assess_caseload(ws, AS_OF, 90.0, reopen=False)
        then = assess_caseload(ws, SINCE, 90.0, reopen=False)
    flagged_now = {str(c) for c, f in zip(now.scores.case_ids, now.is_flagged) if f}
    flagged_then = {str(c) for c, f in zip(then.scores.case_ids, then.is_flagged) if f}
    assert set(data.changes.newly_flagged) == flagged_now - flagged_then
    assert set(data.changes.no_longer_flagged) == flagged_then - flagged_now
    stage_then = dict(zip(map(str, then.scores.case_ids), then.scores.most_likely_stage_names))
    stage_now = dict(zip(map(str, now.scores.case_ids), now.scores.most_likely_stage_names))
    moved = {(c, stage_then[c], stage_now[c]) for c in stage_then if c in stage_now and stage_then[c] != stage_now[c]}
    assert set(data.changes.stage_changes) == moved
    assert set(data.changes.new_cases) == set(stage_now) - set(stage_then)


def test_counts(data):
    s = data.scores
    np.testing.assert_array_equal(data.stage_counts, np.bincount(s.most_likely_stage, minlength=5))
    assert data.stage_counts.sum() == s.n_cases
    assert data.reviews_done == 1 and data.reviews_done + data.reviews_outstanding == data.flagged_rows.size
    np.testing.assert_allclose(data.expected_now.sum(), s.n_cases)
    # Rows are in priority order (contact sooner first).
    assert np.all(np.diff(data.assessment.priority[data.rows]) <= 0)


def test_model_summary_unfitted_and_sojourn_from_rates(data, demo_model):
    from caseview.reports.model_summary import NOT_FITTED

    assert not data.model.fitted and NOT_FITTED in data.model.time_in_stage_source
    # Mean sojourn in a stage of a continuous-time Markov chain is 1 / (total exit rate)
    # (Norris, Markov Chains, 1997, section 2.6). Stable's only exit is Stable -> Slipping.
    stable = data.model.time_in_stage[0]
    assert stable.stage == "Stable"
    assert stable.mean == pytest.approx(1.0 / demo_model.transition("Stable", "Slipping").rate)
    assert data.model.time_in_stage[-1].mean is None     # absorbing


def test_fit_summary_stored_before_format_versions_is_read(demo_model):
    """A summary written by the fit code before FitSummary existed (saved from `caseview fit` on the demo)."""
    import json
    from pathlib import Path

    from caseview.reports.model_summary import summarise_model
    from caseview.storage.workspace import ModelVersion

    stored = json.loads((Path(__file__).resolve().parents[1] / "fitting" / "data" /
                         "fit_summary_format1_demo.json").read_text(encoding="utf-8"))
    version = ModelVersion(4, "2026-11-01T10:00:00Z", "fit", "{}", stored, True)
    summary = summarise_model(demo_model, version)
    labels = dict(summary.statistics)
    assert labels["log-likelihood"] == "-8,933.50" and labels["converged"] == "yes" and labels["cases"] == "400"
    stable = summary.time_in_stage[0]
    assert stable.stage == "Stable" and stable.mean == pytest.approx(536.9, abs=0.1)
    assert (stable.lower, stable.upper) == (pytest.approx(385.8, abs=0.1), pytest.approx(747.05, abs=0.1))
    assert "Wald" in summary.time_in_stage_source
    assert summary.time_in_stage[-1].mean is None
    unreadable = summarise_model(demo_model, ModelVersion(5, "", "", "{}", {"aic": "n/a"}, False))
    assert unreadable.fitted and "unreadable" in dict(unreadable.statistics)["fit summary"]


def test_escape_text_follows_owasp_list():
    from caseview.reports.records import escape_text

    # OWASP "CSV Injection": cells starting with = + - @ tab or carriage return.
    for text in ("=1+1", "+1", "-1", "@SUM(A1)", "\t=1", "\r=1"):
        assert escape_text(text) == "'" + text
    for value in ("plain", "C1", "", 3, -2.5, None):
        assert escape_text(value) == value
