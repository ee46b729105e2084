"""Helpers and constants for report tests (imported by the tests and conftest.py)."""

from __future__ import annotations

import datetime as dt

AS_OF = dt.date(2026, 11, 30)
SINCE = dt.date(2026, 9, 30)
#: Coordinator codes that look like spreadsheet formulas (escaping must keep them inert).
FORMULA_COORDINATORS = ("=HYPERLINK(\"http://example.invalid\")", "+C5", "-C6", "@SUM(A1)")


def pdf_page_texts(path) -> list:
    from pypdf import PdfReader

    return [page.extract_text() or "" for page in PdfReader(str(path)).pages]


def squash(text: str) -> str:
    """Collapse white space (PDF text extraction breaks lines where the layout wrapped them)."""
    return " ".join(str(text).split())


def date_spellings(day: int) -> list:
    """Common ways to write a calendar date (ISO 8601, day-first, month-first, spelled month)."""
    d = dt.date(1970, 1, 1) + dt.timedelta(days=int(day))
    return [d.isoformat(), d.strftime("%d/%m/%Y"), d.strftime("%m/%d/%Y"), d.strftime("%Y/%m/%d"),
            d.strftime("%d.%m.%Y"), f"{d.day} {d.strftime('%b')} {d.year}", f"{d.strftime('%b')} {d.day}, {d.year}",
            d.strftime("%Y%m%d")]
