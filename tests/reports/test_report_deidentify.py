"""Relative-day and shifted-date reports contain no calendar date of the original contacts."""

from __future__ import annotations

import datetime as dt
import re

import numpy as np
import pandas as pd
import pytest

from reports_helpers import AS_OF, SINCE, date_spellings, pdf_page_texts, squash

ISO_LIKE = re.compile(r"\b(19|20)\d{2}[-/.](0[1-9]|1[0-2])[-/.](0[1-9]|[12]\d|3[01])\b")


def _workbook_texts(path) -> tuple:
    from openpyxl import load_workbook

    texts, date_cells = [], []
    for sheet in load_workbook(path).worksheets:
        for row in sheet.iter_rows(values_only=True):
            for value in row:
                if isinstance(value, (dt.date, dt.datetime)):
                    date_cells.append(value)
                elif value is not None:
                    texts.append(str(value))
    return " | ".join(texts), date_cells


def _all_spellings(original_contact_days) -> set:
    days = {d for ds in original_contact_days.values() for d in ds}
    days |= {(AS_OF - dt.date(1970, 1, 1)).days, (SINCE - dt.date(1970, 1, 1)).days}
    return {s for d in days for s in date_spellings(d)}


def test_relative_exports_contain_no_calendar_date(relative_reports, original_contact_days):
    spellings = _all_spellings(original_contact_days)
    pdf_text = " ".join(pdf_page_texts(relative_reports["pdf"].path))
    xlsx_text, date_cells = _workbook_texts(relative_reports["xlsx"].path)
    csv_text = relative_reports["csv"].path.read_text(encoding="utf-8")
    assert date_cells == [], "relative workbook must hold no date cells"
    for name, text in (("pdf", pdf_text), ("xlsx", xlsx_text), ("csv", csv_text)):
        hits = sorted(s for s in spellings if s in text)
        assert not hits, f"{name} shows original dates {hits[:5]}"
        # Stronger: nothing that looks like a calendar date at all (review times, model dates too).
        assert not ISO_LIKE.search(text), f"{name}: {ISO_LIKE.search(text).group(0)}"
    assert "as-of date withheld" in squash(pdf_text)


def test_relative_days_are_days_since_first_contact(relative_reports, original_contact_days):
    frame = pd.read_csv(relative_reports["csv"].path)
    for column in ("as_of_day_relative", "last_contact_day_relative", "next_contact_due_day_relative"):
        assert column in frame.columns
    as_of_day = (AS_OF - dt.date(1970, 1, 1)).days
    for _, row in frame.iterrows():
        days = original_contact_days[row["case_id"]]
        assert row["as_of_day_relative"] == as_of_day - days[0]
        last = max(d for d in days if d <= as_of_day)
        assert row["last_contact_day_relative"] == last - days[0]
        assert row["days_since_contact"] == as_of_day - last


def test_shifted_rows_move_each_case_by_its_own_offset(shifted_reports, calendar_reports, original_contact_days):
    frame = pd.read_csv(shifted_reports["csv"].path)
    calendar = pd.read_csv(calendar_reports["csv"].path)
    calendar_due = dict(zip(calendar["case_id"], calendar["next_contact_due"]))
    as_of_day = (AS_OF - dt.date(1970, 1, 1)).days
    offsets = []
    for _, row in frame.iterrows():
        days = original_contact_days[row["case_id"]]
        last = max(d for d in days if d <= as_of_day)
        shifted_last = (dt.date.fromisoformat(row["last_contact"]) - dt.date(1970, 1, 1)).days
        shifted_as_of = (dt.date.fromisoformat(row["as_of"]) - dt.date(1970, 1, 1)).days
        offset = shifted_last - last
        assert shifted_as_of - as_of_day == offset        # the whole case moves together
        assert 1 <= abs(offset) <= 180
        offsets.append(offset)
        due = calendar_due.get(row["case_id"])
        if isinstance(due, str):
            shifted_due = dt.date.fromisoformat(row["next_contact_due"])
            assert (shifted_due - dt.date.fromisoformat(due)).days == offset
        # Every date field differs from its own original value (offset != 0). A shifted date may still
        # coincide with some *other* contact date of the case (when the offset equals a gap between
        # contacts); that is a property of shifting, one reason it is not Safe Harbor de-identification.
        assert row["last_contact"] != (dt.date(1970, 1, 1) + dt.timedelta(days=last)).isoformat()
    assert len(set(offsets)) > len(offsets) // 2, "offsets should differ between cases"


def test_shifted_workbook_and_pdf_hide_report_dates(shifted_reports, original_contact_days):
    from openpyxl import load_workbook

    sheet = load_workbook(shifted_reports["xlsx"].path)["Cases"]
    header = [c.value for c in sheet[2]]
    col = {n: j for j, n in enumerate(header)}
    as_of_day = (AS_OF - dt.date(1970, 1, 1)).days
    for row in sheet.iter_rows(min_row=3, values_only=True):
        days = original_contact_days[row[col["case_id"]]]
        shift = (row[col["as_of"]].date() - AS_OF).days
        assert 1 <= abs(shift) <= 180
        last = (row[col["last_contact"]].date() - dt.date(1970, 1, 1)).days
        assert last - max(d for d in days if d <= as_of_day) == shift
    flat = squash(" ".join(pdf_page_texts(shifted_reports["pdf"].path)))
    assert AS_OF.isoformat() not in flat
    assert "NOT Safe Harbor de-identification" in flat


def test_shifted_offsets_are_reproducible_with_a_seed_and_random_without():
    from caseview.reports.deidentify import DateView

    first = np.arange(50) + 19000
    a, b = DateView("shifted", first, seed=3), DateView("shifted", first, seed=3)
    np.testing.assert_array_equal(a.offsets, b.offsets)
    assert np.all((np.abs(a.offsets) >= 1) & (np.abs(a.offsets) <= 180))
    c, d = DateView("shifted", first), DateView("shifted", first)
    assert not np.array_equal(c.offsets, d.offsets)   # fresh entropy; equal with chance 360**-50


def test_rewrite_dates_in_reason_text():
    from caseview.reports.deidentify import DateView, rewrite_dates

    view = DateView("relative", np.array([(dt.date(2026, 1, 1) - dt.date(1970, 1, 1)).days]))
    text = "effect of recent contacts: 2026-01-11 (mobility=slow) +0.20; 2026-03-02 +0.05"
    assert rewrite_dates(text, view, 0) == "effect of recent contacts: day 10 (mobility=slow) +0.20; day 60 +0.05"
    assert rewrite_dates(text, DateView("calendar", view.first_contact_day), 0) == text


def test_unknown_date_mode_is_an_input_error():
    from caseview.errors import InputError
    from caseview.reports.deidentify import DateView

    with pytest.raises(InputError, match="calendar, relative, shifted"):
        DateView("blurred", np.zeros(1, dtype=np.int64))


def test_review_notes_are_left_out_of_deidentified_reports(relative_reports, calendar_reports):
    # a note is free text a supervisor typed: it may name a person or a date, so a de-identified
    # report shows that a note exists, never its words
    from caseview.reports.records import NOTE_LEFT_OUT

    relative = pd.read_csv(relative_reports["csv"].path)
    calendar = pd.read_csv(calendar_reports["csv"].path)
    assert (calendar["review_note"] == "seen at meeting").sum() == 1
    assert "seen at meeting" not in relative_reports["csv"].path.read_text(encoding="utf-8")
    assert (relative["review_note"] == NOTE_LEFT_OUT).sum() == 1
    pdf_text = " ".join(pdf_page_texts(relative_reports["pdf"].path))
    assert "seen at meeting" not in pdf_text
