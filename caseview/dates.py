"""Dates: the one place for the day-number convention, parsing and formatting.

The application counts calendar days since 1970-01-01 (:data:`EPOCH`), the same numbers as
``numpy.datetime64(date, "D").astype(int)``; the engine sees them as float times in days. Every
conversion between a ``datetime.date``, a day number, ISO text (YYYY-MM-DD) and ``datetime64[D]``
goes through the functions here, so a change of convention has one home.

Messages name the value and what was expected (``what`` says which value it is); they never name a
command-line option, because the window shows them too.
"""

from __future__ import annotations

import datetime as dt

import numpy as np

__all__ = ["EPOCH", "to_day", "from_day", "day_text", "days_text", "days_as_datetime64", "parse_date",
           "timestamp_day"]

#: Day 0 of the day numbers.
EPOCH = dt.date(1970, 1, 1)


def to_day(date: dt.date) -> int:
    """Days since 1970-01-01 of a calendar date."""
    return (date - EPOCH).days


def from_day(day) -> dt.date:
    """The calendar date of a day number (days since 1970-01-01)."""
    return EPOCH + dt.timedelta(days=int(day))


def day_text(day) -> str:
    """ISO text (YYYY-MM-DD) of a day number."""
    return str(np.datetime64(int(day), "D"))


def days_text(days) -> list:
    """ISO texts (YYYY-MM-DD) of many day numbers, shape (n,) -> list of n str (vectorised)."""
    return np.datetime_as_string(np.asarray(days, dtype="int64").astype("datetime64[D]")).tolist()


def days_as_datetime64(day_numbers) -> np.ndarray:
    """Day numbers (float allowed, rounded to the nearest day), shape (n,) -> ``datetime64[D]`` (n,)."""
    return np.round(np.asarray(day_numbers, dtype=float)).astype(np.int64).astype("datetime64[D]")


def parse_date(text: str, what: str = "date") -> dt.date:
    """Parse an ISO 8601 calendar date (YYYY-MM-DD) or raise InputError naming ``what``."""
    from .errors import InputError

    try:
        if len(text) != 10:
            raise ValueError
        return dt.date.fromisoformat(text)
    except (TypeError, ValueError):
        raise InputError(f"{what}: expected a date as YYYY-MM-DD, got {text!r}") from None


def timestamp_day(timestamp) -> int | None:
    """Day number of an ISO timestamp or date text ('2026-11-30T09:15:00Z' -> day of 2026-11-30).

    None for an empty or unreadable value.
    """
    if timestamp is None:
        return None
    text = str(timestamp).strip()
    if len(text) < 10:
        return None
    try:
        return to_day(dt.date.fromisoformat(text[:10]))
    except ValueError:
        return None
