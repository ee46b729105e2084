"""The report's outlook page (PDF) and Outlook sheet (XLSX) show the same outlook as ``caseview outlook``."""

from __future__ import annotations

import datetime as dt
import re

import pytest

from caseview.cli.main import main
from caseview.operations.outlook import run_outlook
from caseview.storage import Workspace

AS_OF = dt.date(2026, 11, 30)


@pytest.fixture(scope="module")
def demo_ws(tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "demo.cvw"
    assert main(["demo", str(path)]) == 0
    return path


def _pdf_pages(path):
    from pypdf import PdfReader

    return [page.extract_text() or "" for page in PdfReader(str(path)).pages]


def test_pdf_has_an_outlook_page_with_the_3_6_12_month_table(demo_ws, tmp_path):
    out = tmp_path / "meeting.pdf"
    assert main(["report", str(demo_ws), "--as-of", AS_OF.isoformat(), "--out", str(out)]) == 0
    pages = [p for p in _pdf_pages(out) if "Caseload outlook" in p]
    assert len(pages) == 1
    page = pages[0]
    with Workspace.open(demo_ws) as ws:
        outlook = run_outlook(ws, AS_OF)
    for month in (3, 6, 12):
        assert outlook.dates[month - 1].isoformat() in page
    c = outlook.rows.index("follow-up stages")
    assert f"{outlook.expected[11, c]:,.1f} ({outlook.lower_95[11, c]:,.0f}" in page
    assert "New referrals:" in page and "Advisory only" in page


def test_xlsx_outlook_sheet_rows_and_relative_dates(demo_ws, tmp_path):
    from openpyxl import load_workbook

    with Workspace.open(demo_ws) as ws:
        outlook = run_outlook(ws, AS_OF)
    out = tmp_path / "caseload.xlsx"
    assert main(["report", str(demo_ws), "--as-of", AS_OF.isoformat(), "--out", str(out)]) == 0
    sheet = load_workbook(out)["Outlook"]
    rows = list(sheet.iter_rows(values_only=True))
    assert rows[0][0].startswith("Advisory only")
    assert list(rows[1][:6]) == ["date", "stage", "expected", "lower_95", "upper_95", "entries_expected"]
    body = rows[2:2 + 12 * len(outlook.rows)]
    assert body[0][:2] == (outlook.dates[0].isoformat(), outlook.rows[0])
    assert body[0][2] == pytest.approx(outlook.expected[0, 0], abs=0.005)
    assert any(r[0] == "note" and str(r[1]).startswith("New referrals:") for r in rows)
    relative = tmp_path / "share.xlsx"
    assert main(["report", str(demo_ws), "--as-of", AS_OF.isoformat(), "--out", str(relative),
                 "--dates", "relative"]) == 0
    text = " ".join(str(v) for r in load_workbook(relative)["Outlook"].iter_rows(values_only=True) for v in r if v)
    assert "+1 months" in text and not re.search(r"\b20\d\d-\d\d-\d\d\b", text)
