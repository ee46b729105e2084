"""caseview.dates: the one home of the day-number convention (issue 14 item 5)."""

import datetime as dt
import pathlib
import re

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from caseview.dates import (EPOCH, day_text, days_as_datetime64, days_text, from_day, parse_date, timestamp_day,
                            to_day)
from caseview.errors import InputError

ROOT = pathlib.Path(__file__).resolve().parents[2]


@given(st.dates(min_value=dt.date(1900, 1, 1), max_value=dt.date(2199, 12, 31)))
def test_day_numbers_are_numpys_days_since_1970(date):
    # numpy: datetime64[D] counts days from 1970-01-01 (numpy "Datetimes and Timedeltas" docs)
    day = to_day(date)
    assert day == np.datetime64(date.isoformat(), "D").astype(np.int64)
    assert from_day(day) == date and day_text(day) == date.isoformat()
    assert days_text(np.array([day, day + 1])) == [date.isoformat(), (date + dt.timedelta(days=1)).isoformat()]


def test_epoch_and_conversions():
    assert to_day(EPOCH) == 0 and from_day(-1) == dt.date(1969, 12, 31)
    assert days_as_datetime64([0.4, 1.6]).tolist() == [dt.date(1970, 1, 1), dt.date(1970, 1, 3)]
    assert timestamp_day(" 2026-11-30T09:15:00Z") == to_day(dt.date(2026, 11, 30))
    assert timestamp_day("") is None and timestamp_day(None) is None and timestamp_day("2026-13-01") is None


@pytest.mark.parametrize("text", ["2026-1-5", "30/11/2026", "2026-11-31", "", None])
def test_parse_date_names_the_value_not_an_option(text):
    with pytest.raises(InputError) as caught:
        parse_date(text, "the as-of date")
    assert str(caught.value) == f"the as-of date: expected a date as YYYY-MM-DD, got {text!r}"


def test_the_epoch_is_spelled_out_in_one_module_only():
    """Every other module converts through caseview.dates (no second 1970-01-01, no hand-made datetime64 days)."""
    spelled = re.compile(r"date\(1970|datetime64\(int\(|astype\(\"datetime64\[D\]\"\)")
    offenders = [str(path.relative_to(ROOT)) for path in (ROOT / "caseview").rglob("*.py")
                 if path.name != "dates.py" and spelled.search(path.read_text(encoding="utf-8"))]
    assert offenders == []


def test_nobody_imports_dates_from_scoring():
    pattern = re.compile(r"from (caseview)?\.*scoring import [^\n]*\b(to_day|from_day|parse_date|EPOCH)\b")
    offenders = [str(path.relative_to(ROOT)) for folder in ("caseview", "tests", "benchmarks")
                 for path in (ROOT / folder).rglob("*.py") if pattern.search(path.read_text(encoding="utf-8"))]
    assert offenders == []
