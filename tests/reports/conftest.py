"""Fixtures for report tests: one small simulated workspace and the reports made from it.

The caseload is simulated with ``hmm.simulate.simulate_caseload`` from the demo model (invented
rates), stored through the real workspace, and assessed by the real follow-up code. Reports are
built once per session (they take a few seconds each) and shared by the tests.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pytest

from reports_helpers import AS_OF, FORMULA_COORDINATORS, SINCE

FIRST_DAY = (dt.date(2024, 6, 3) - dt.date(1970, 1, 1)).days
N_CASES = 36


def _simulated_batch(model, rng):
    from caseview.storage.contact_writer import ContactBatch
    from hmm.simulate import simulate_caseload

    as_of_day = (AS_OF - dt.date(1970, 1, 1)).days
    times, covariates = [], []
    for i in range(N_CASES):
        start = FIRST_DAY + int(rng.integers(0, 500))
        gaps = rng.integers(14, 113, size=40)           # every 2 to 16 weeks (SCENARIO.md)
        days = start + np.concatenate([[0], np.cumsum(gaps)])
        days = days[days <= as_of_day - 2]
        times.append(days.astype(float))
        covariates.append([float(rng.random() < 0.4), float(rng.random() < 0.3)])
    simulated = simulate_caseload(model, times, np.array(covariates), rng, missing_probability=0.15)
    t = simulated.timelines
    case_codes = np.array([f"T-{i + 1:04d}" for i in t.case_of_contact], dtype=object)
    coordinators = np.array([f"C{i % 3 + 1}" for i in t.case_of_contact], dtype=object)
    for k, code in enumerate(FORMULA_COORDINATORS):          # one case each
        coordinators[t.case_of_contact == N_CASES - 1 - k] = code
    known = np.full(t.n_contacts, "", dtype=object)
    exact = t.allowed_stages.sum(axis=1) == 1
    known[exact] = [model.stages[int(np.argmax(row))] for row in t.allowed_stages[exact]]
    return ContactBatch(case_codes, t.times.astype(np.int64), coordinators, tuple(c.name for c in model.channels),
                        tuple(c.categories for c in model.channels), t.observations.astype(np.int16),
                        tuple(model.covariates), t.covariates.astype(float), known)


@pytest.fixture(scope="session")
def report_workspace(tmp_path_factory):
    """Path of a workspace with a simulated caseload, one review recorded."""
    from caseview.followup import assess_caseload, record_review
    from caseview.storage import Workspace

    root = Path(__file__).resolve().parents[2]
    model_text = (root / "resources" / "models" / "home_support_demo.json").read_text(encoding="utf-8")
    path = tmp_path_factory.mktemp("reports") / "simulated.cvw"
    ws = Workspace.create(path, model_text, "tester")
    model, _ = ws.current_model()
    with ws.transaction():  # audited like an import, so the audit trail covers the rows
        counts = ws.write_contacts(_simulated_batch(model, np.random.default_rng(20261130)))
        ws.audit_append("tester", "import", "simulated timelines", {}, changes=counts.row_changes)
    assessment = assess_caseload(ws, AS_OF, 90.0)
    flagged = [str(c) for c, f in zip(assessment.scores.case_ids, assessment.is_flagged) if f]
    assert len(flagged) >= 3, "the simulated caseload should have some flagged cases"
    record_review(ws, flagged[0], "acknowledged", "seen at meeting", "supervisor-1", assessment)
    ws.close()
    return path


@pytest.fixture(scope="session")
def original_contact_days(report_workspace):
    """Case ID -> every contact day (days since 1970-01-01) stored in the workspace."""
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        model, _ = ws.current_model()
        caseload = ws.load_caseload(model)
    t = caseload.timelines
    return {str(caseload.case_ids[i]): caseload.contact_days[t.offsets[i]:t.offsets[i + 1]].tolist()
            for i in range(t.n_cases)}


def _build(report_workspace, tmp_path_factory, name, **options):
    from caseview.reports import build_report
    from caseview.storage import Workspace

    out = tmp_path_factory.mktemp("out") / name
    with Workspace.open(report_workspace) as ws:
        result = build_report(ws, AS_OF, out, actor="report-tester", **options)
    return result


@pytest.fixture(scope="session")
def calendar_reports(report_workspace, tmp_path_factory):
    return {kind: _build(report_workspace, tmp_path_factory, f"calendar.{kind}", since=SINCE)
            for kind in ("pdf", "xlsx", "csv")}


@pytest.fixture(scope="session")
def relative_reports(report_workspace, tmp_path_factory):
    return {kind: _build(report_workspace, tmp_path_factory, f"relative.{kind}", since=SINCE, dates="relative")
            for kind in ("pdf", "xlsx", "csv")}


@pytest.fixture(scope="session")
def shifted_reports(report_workspace, tmp_path_factory):
    return {kind: _build(report_workspace, tmp_path_factory, f"shifted.{kind}", dates="shifted", seed=7)
            for kind in ("pdf", "xlsx", "csv")}
