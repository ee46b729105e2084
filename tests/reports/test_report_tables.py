"""The XLSX workbook and the CSV stage summary: sheets, columns, types, escaping, values."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from caseview import ADVISORY_NOTICE
from reports_helpers import AS_OF, FORMULA_COORDINATORS

STAGE_COLUMNS = ["stable", "slipping", "struggling", "crisis", "moved_to_residential_care"]


@pytest.fixture(scope="module")
def scores(report_workspace):
    from caseview.scoring import score_caseload
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        return score_caseload(ws, AS_OF, 90.0)


def _sheet_rows(path, name):
    from openpyxl import load_workbook

    book = load_workbook(path)
    return book, book[name]


def test_workbook_sheets_caution_and_frozen_headers(calendar_reports):
    from openpyxl import load_workbook

    book = load_workbook(calendar_reports["xlsx"].path)
    assert book.sheetnames == ["Summary", "Cases", "Flags", "Reviews", "Outlook", "Notes"]
    for sheet in book.worksheets:
        assert sheet["A1"].value == ADVISORY_NOTICE
        assert sheet.freeze_panes in ("A3", "B3")
        assert sheet.cell(row=2, column=1).font.bold
        assert sheet.column_dimensions["A"].width >= 10


def test_cases_sheet_columns_types_and_values(calendar_reports, scores):
    from openpyxl import load_workbook

    sheet = load_workbook(calendar_reports["xlsx"].path)["Cases"]
    header = [c.value for c in sheet[2]]
    for name in (["case_id", "coordinator", "as_of", "last_contact", "days_since_contact", "most_likely_stage",
                  "p_reach_follow_up", "flags", "next_contact_due", "review_status"]
                 + [f"p_{s}" for s in STAGE_COLUMNS] + [f"p_{s}_at_horizon" for s in STAGE_COLUMNS]):
        assert name in header
    col = {name: j for j, name in enumerate(header)}
    rows = list(sheet.iter_rows(min_row=3, values_only=True))
    assert len(rows) == scores.n_cases == calendar_reports["xlsx"].count
    for row in rows:
        r = scores.row_of(row[col["case_id"]])
        assert r >= 0
        # Values are the scoring module's own numbers, stored as numbers and dates.
        assert all(isinstance(row[col[f"p_{s}"]], (int, float)) for s in STAGE_COLUMNS)  # 0.0 reads back as 0
        np.testing.assert_allclose([row[col[f"p_{s}"]] for s in STAGE_COLUMNS], scores.p_now[r], atol=1e-12)
        np.testing.assert_allclose([row[col[f"p_{s}_at_horizon"]] for s in STAGE_COLUMNS], scores.p_at_horizon[r],
                                   atol=1e-12)
        assert isinstance(row[col["days_since_contact"]], int)
        assert row[col["days_since_contact"]] == scores.days_since_contact[r]
        assert isinstance(row[col["last_contact"]], dt.datetime)   # openpyxl reads dates back as datetimes
        assert (row[col["last_contact"]].date() - dt.date(1970, 1, 1)).days == scores.last_contact_day[r]
        assert row[col["as_of"]].date() == AS_OF


def test_no_formula_cells_and_formula_like_text_escaped(calendar_reports):
    from openpyxl import load_workbook

    book = load_workbook(calendar_reports["xlsx"].path)
    for sheet in book.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                assert cell.data_type != "f", f"{sheet.title}!{cell.coordinate} is a formula"
    coordinators = {c.value for c in book["Cases"]["B"][2:]}
    for code in FORMULA_COORDINATORS:
        # OWASP "CSV injection": prefix a single quote so the text is shown, never evaluated.
        assert "'" + code in coordinators
        assert code not in coordinators


def test_flags_and_reviews_sheets(calendar_reports, scores):
    from openpyxl import load_workbook

    book = load_workbook(calendar_reports["xlsx"].path)
    flags = list(book["Flags"].iter_rows(min_row=2, values_only=True))
    header, rows = flags[0], flags[1:]
    assert header[:4] == ("case_id", "coordinator", "rule", "message")
    assert rows and all(r[2] for r in rows)
    assert {r[2] for r in rows} <= {"in_follow_up_now", "likely_to_reach_follow_up", "long_gap_uncertain",
                                    "sharp_rise"}
    reviews = list(book["Reviews"].iter_rows(min_row=2, values_only=True))
    status = {r[0]: r[4] for r in reviews[1:]}
    assert list(status.values()).count("acknowledged") == 1
    assert reviews[0][4] == "review_status"
    # the review note is in the report (issue 15 item 7), beside its status
    assert reviews[0][-1] == "review_note"
    notes = {r[0]: r[-1] for r in reviews[1:]}
    acknowledged = next(c for c, st in status.items() if st == "acknowledged")
    assert notes[acknowledged] == "seen at meeting"
    # reasons are sentences; the numbers are in the value and threshold columns
    message = header.index("message")
    assert all(r[message].endswith(".") and ">=" not in r[message] for r in rows)
    assert all(isinstance(r[header.index("value")], (int, float)) for r in rows)


def test_csv_columns_and_values(calendar_reports, scores):
    frame = pd.read_csv(calendar_reports["csv"].path)   # pandas defaults must read it
    expected = (["case_id", "coordinator", "as_of", "last_contact", "days_since_contact"]
                + [f"p_{s}" for s in STAGE_COLUMNS] + ["most_likely_stage"]
                + [f"p_{s}_at_horizon" for s in STAGE_COLUMNS]
                + ["p_follow_up_now", "p_reach_follow_up", "flags", "reasons", "next_contact_due", "review_status",
                   "review_note", "advisory"])
    assert list(frame.columns) == expected
    assert len(frame) == scores.n_cases
    assert (frame["advisory"] == ADVISORY_NOTICE).all()
    assert (frame["as_of"] == AS_OF.isoformat()).all()
    rows = [scores.row_of(c) for c in frame["case_id"]]
    np.testing.assert_allclose(frame[[f"p_{s}" for s in STAGE_COLUMNS]].to_numpy(), scores.p_now[rows], atol=1e-6)
    np.testing.assert_allclose(frame["p_reach_follow_up"], scores.p_reach_follow_up[rows], atol=1e-6)
    # Probabilities of each case sum to one (law of total probability), now and at the horizon.
    np.testing.assert_allclose(frame[[f"p_{s}" for s in STAGE_COLUMNS]].sum(axis=1), 1.0, atol=1e-5)
    np.testing.assert_allclose(frame[[f"p_{s}_at_horizon" for s in STAGE_COLUMNS]].sum(axis=1), 1.0, atol=1e-5)


def test_csv_escapes_formula_like_text(calendar_reports):
    text = calendar_reports["csv"].path.read_text(encoding="utf-8")
    frame = pd.read_csv(calendar_reports["csv"].path)
    for code in FORMULA_COORDINATORS:
        assert ("'" + code) in set(frame["coordinator"])
    for line in text.splitlines():
        for field in line.split(","):
            assert not field.startswith(("=", "+", "@")), line


def test_coordinator_and_flagged_only_filters(report_workspace, tmp_path, scores):
    from caseview.reports import build_report
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        result = build_report(ws, AS_OF, tmp_path / "c2.csv", coordinator="C2", flagged_only=True, actor="t")
    frame = pd.read_csv(result.path)
    assert set(frame["coordinator"]) == {"C2"}
    assert frame["flags"].notna().all()
    from caseview.followup import assess_caseload

    with Workspace.open(report_workspace) as ws:
        a = assess_caseload(ws, AS_OF, 90.0, reopen=False)
    wanted = {str(c) for c, k, f in zip(a.scores.case_ids, a.scores.coordinators, a.is_flagged) if f and k == "C2"}
    assert set(frame["case_id"]) == wanted
