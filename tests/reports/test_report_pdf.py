"""The PDF report: caution, as-of date and page numbers on every page, flagged cases, charts, metadata."""

from __future__ import annotations

import re

import numpy as np
import pytest

from caseview import ADVISORY_NOTICE
from reports_helpers import AS_OF, pdf_page_texts, squash


@pytest.fixture(scope="module")
def assessment(report_workspace):
    from caseview.followup import assess_caseload
    from caseview.storage import Workspace

    with Workspace.open(report_workspace) as ws:
        return assess_caseload(ws, AS_OF, 90.0, reopen=False)


def test_every_page_has_caution_as_of_and_page_number(calendar_reports):
    texts = pdf_page_texts(calendar_reports["pdf"].path)
    assert len(texts) == calendar_reports["pdf"].count >= 5
    for number, text in enumerate(texts, start=1):
        flat = squash(text)
        assert squash(ADVISORY_NOTICE) in flat, f"page {number} lacks the advisory caution"
        assert f"as of {AS_OF.isoformat()}" in flat, f"page {number} lacks the as-of date"
        assert f"page {number} of {len(texts)}" in flat


def test_flagged_case_ids_and_review_status_in_text(calendar_reports, assessment):
    flat = squash(" ".join(pdf_page_texts(calendar_reports["pdf"].path)))
    flagged = [str(c) for c, f in zip(assessment.scores.case_ids, assessment.is_flagged) if f]
    assert flagged
    for case_id in flagged:
        assert case_id in flat
    # The one review recorded in the fixture is counted as done.
    assert re.search(r"\b1 reviewed by a supervisor", flat)
    assert "seen at meeting" in flat  # the review's note is shown beside its status
    assert f"{len(flagged) - 1} outstanding" in flat
    assert "rates not fitted to this caseload" in flat.lower()


def test_unflagged_cases_are_not_in_the_flag_table(calendar_reports, assessment):
    pages = pdf_page_texts(calendar_reports["pdf"].path)
    table = squash(" ".join(p for p in pages if "Flagged cases (" in p))
    unflagged = [str(c) for c, f in zip(assessment.scores.case_ids, assessment.is_flagged) if not f]
    # Changes-since lists live on the cover, not on these pages, so no unflagged ID may appear here.
    assert not [c for c in unflagged if re.search(rf"\b{c}\b", table)]


def _fill_colours(page) -> set:
    """Non-stroking RGB colours set by 'r g b rg' operators (PDF 32000-1:2008, section 8.6.8, table 74)."""
    data = page.get_contents().get_data().decode("latin-1")
    found = set()
    for r, g, b in re.findall(r"([\d.]+) ([\d.]+) ([\d.]+) rg", data):
        found.add(tuple(round(float(v) * 255) for v in (r, g, b)))
    return found


def test_chart_pages_draw_stage_coloured_areas(calendar_reports):
    from pypdf import PdfReader

    from caseview.reports.style import stage_colours

    reader = PdfReader(str(calendar_reports["pdf"].path))
    stage_rgb = {tuple(int(h[i:i + 2], 16) for i in (1, 3, 5)) for h in stage_colours(5)}
    texts = [squash(p.extract_text()) for p in reader.pages]
    chart_pages = [i for i, t in enumerate(texts) if "Expected stage occupancy" in t or "stage probabilities over time" in t]
    assert len(chart_pages) >= 2
    for i in chart_pages:
        colours = _fill_colours(reader.pages[i])
        # Each stage band is filled in its Okabe-Ito colour (within rounding of 8-bit values).
        near = {c for c in colours for s in stage_rgb if max(abs(a - b) for a, b in zip(c, s)) <= 1}
        assert len(near) >= 4, f"page {i + 1}: stage fill colours missing ({sorted(colours)})"
        data = reader.pages[i].get_contents().get_data()
        assert data.count(b" l\n") + data.count(b" l ") > 100, "expected many drawn path segments"


def test_metadata_has_title_and_no_case_data(calendar_reports, assessment):
    from pypdf import PdfReader

    meta = PdfReader(str(calendar_reports["pdf"].path)).metadata
    assert meta.title == "caseview caseload report"
    text = " ".join(str(v) for v in meta.values())
    assert not any(str(c) in text for c in assessment.scores.case_ids)


def test_timeline_cap_says_how_many_were_left_out(report_workspace, tmp_path, monkeypatch, assessment):
    from caseview.reports import build_report, pdf
    from caseview.storage import Workspace

    monkeypatch.setattr(pdf, "MAX_TIMELINES", 2)
    n_flagged = int(np.sum(assessment.is_flagged))
    with Workspace.open(report_workspace) as ws:
        result = build_report(ws, AS_OF, tmp_path / "capped.pdf", flagged_only=True, actor="t")
    flat = squash(" ".join(pdf_page_texts(result.path)))
    assert f"first 2 flagged cases by priority; {n_flagged - 2} more left out" in flat


def test_flag_table_cap_lists_the_most_urgent_and_says_where_the_rest_are(report_workspace, tmp_path, monkeypatch,
                                                                          assessment):
    from caseview.reports import build_report, pdf
    from caseview.storage import Workspace

    monkeypatch.setattr(pdf, "MAX_LISTED_FLAGGED", 3)
    flagged = np.flatnonzero(assessment.is_flagged)
    assert flagged.size > 3
    urgent_first = flagged[np.argsort(-assessment.priority[flagged], kind="stable")]
    with Workspace.open(report_workspace) as ws:
        result = build_report(ws, AS_OF, tmp_path / "capped.pdf", actor="t")
    texts = pdf_page_texts(result.path)
    flat = squash(" ".join(texts))
    assert f"the 3 most urgent of {flagged.size:,}" in flat
    left_out = flagged.size - 3
    assert f"{left_out:,} more flagged case{'' if left_out == 1 else 's'} {'is' if left_out == 1 else 'are'} " \
           "not listed in this PDF" in flat
    assert "Do not take a case's absence here to mean it needs no follow-up" in flat
    table = squash(" ".join(t for t in texts if "Flagged cases" in t))
    for r in urgent_first[:3]:
        assert str(assessment.scores.case_ids[r]) in table
