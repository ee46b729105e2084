"""How dates appear in a report: calendar dates, days since first contact, or shifted dates.

Three modes, chosen with ``dates=``:

``calendar``
    Dates as recorded. For use inside the team.
``relative``
    Every date of a case becomes the number of days since that case's first contact (day 0).
    The report's own as-of date and the "changes since" date are withheld too (otherwise
    ``as-of date - as_of_day_relative`` would give back each case's first-contact date), and
    caseload charts use days relative to the as-of date. No calendar date of anyone's data
    appears. This is the safer choice for sharing outside the team.
``shifted``
    Each case's dates are moved by its own random offset, a whole number of days drawn uniformly
    from -180..-1 and 1..180 with a ``numpy.random.Generator`` (seeded by the user, or from the
    operating system's entropy). Intervals within a case are preserved; the report's own dates
    are withheld as in ``relative``. **Shifted dates are NOT Safe Harbor de-identification**
    (45 CFR 164.514(b)(2) requires removing all date elements except the year): the dates still
    look like real dates, season and weekday patterns survive, and anyone who learns one true
    date of a case can undo its shift. Prefer ``relative``.

The seed value is never written to the report or the audit trail (it would allow undoing the
shifts); the audit records only whether a seed was given.
"""

from __future__ import annotations

import datetime as dt
import re

import numpy as np

from hmm.random_state import random_generator

from caseview.dates import from_day, timestamp_day, to_day  # noqa: F401  (timestamp_day: read from here too)
from caseview.errors import InputError

DATE_MODES = ("calendar", "relative", "shifted")

#: Largest shift in days, either way (shifted mode).
MAX_SHIFT_DAYS = 180

SHIFTED_CAVEAT = (
    "Dates in this report are shifted by a random offset per case. Shifted dates are NOT Safe Harbor "
    "de-identification: intervals, weekdays and seasons survive, and one known true date undoes a case's "
    "shift. Days since first contact (--dates relative) are safer.")
RELATIVE_NOTE = (
    "Dates in this report are days since each case's first contact (day 0); the report's own dates are "
    "withheld so they cannot be combined with these days to recover calendar dates.")


class DateView:
    """Turns a case's day numbers (days since 1970-01-01) into what the report shows.

    Parameters
    ----------
    mode : {"calendar", "relative", "shifted"}
    first_contact_day : ndarray of int64, shape (n_cases,)
        Each case's first contact (the origin of relative days).
    seed : int or None
        Seed for the shifted mode's offsets; None draws fresh entropy.
    """

    def __init__(self, mode: str, first_contact_day, seed=None):
        if mode not in DATE_MODES:
            raise InputError(f"date mode: expected one of {', '.join(DATE_MODES)}, got {mode!r}")
        self.mode = mode
        self.first_contact_day = np.asarray(first_contact_day, dtype=np.int64)
        n = self.first_contact_day.shape[0]
        if mode == "shifted":
            rng = random_generator(seed)
            size = rng.integers(1, MAX_SHIFT_DAYS + 1, size=n)
            sign = np.where(rng.random(n) < 0.5, -1, 1)
            self.offsets = (size * sign).astype(np.int64)
        else:
            self.offsets = np.zeros(n, dtype=np.int64)

    # ------------------------------------------------------------------ kinds
    @property
    def deidentified(self) -> bool:
        """True when no calendar date of the original data may appear."""
        return self.mode != "calendar"

    @property
    def is_relative(self) -> bool:
        return self.mode == "relative"

    def column_name(self, base: str) -> str:
        """``last_contact`` -> ``last_contact_day_relative`` in relative mode, else unchanged."""
        return f"{base}_day_relative" if self.is_relative else base

    # ------------------------------------------------------------- case dates
    def case_value(self, row: int, day):
        """A case's day as a value: ``datetime.date`` (calendar/shifted), ``int`` (relative), or None.

        ``day`` below 0 or None means "no date" and gives None.
        """
        if day is None or day < 0:
            return None
        day = int(day)
        if self.mode == "relative":
            return day - int(self.first_contact_day[row])
        return from_day(day + int(self.offsets[row]))

    def case_text(self, row: int, day, missing: str = "") -> str:
        """A case's day as display text ("2026-11-30", "day 412")."""
        value = self.case_value(row, day)
        if value is None:
            return missing
        if isinstance(value, dt.date):
            return value.isoformat()
        return f"day {value}"

    def case_timestamp_value(self, row: int, timestamp: str):
        """A stored UTC timestamp text (e.g. a review time) shown like the case's other dates."""
        day = timestamp_day(timestamp)
        if day is None:
            return None
        if self.mode == "calendar":
            return str(timestamp)
        return self.case_value(row, day)

    def case_days_axis(self, row: int, days) -> np.ndarray:
        """Chart x values for a case: days since first contact (relative) or day numbers (others).

        Returns
        -------
        ndarray, shape like ``days``: float days; the chart converts calendar day numbers to dates.
        """
        days = np.asarray(days, dtype=float)
        if self.mode == "relative":
            return days - float(self.first_contact_day[row])
        return days + float(self.offsets[row])

    # ---------------------------------------------------------- report dates
    def report_date_text(self, date: dt.date | None, what: str = "as-of") -> str:
        """The report's own dates (as-of, since): shown only in calendar mode."""
        if date is None:
            return ""
        if self.deidentified:
            return f"{what} date withheld ({self.mode} dates)"
        return date.isoformat()

    def caveat(self) -> str:
        """One paragraph describing the date mode ('' for calendar)."""
        return {"calendar": "", "relative": RELATIVE_NOTE, "shifted": SHIFTED_CAVEAT}[self.mode]


_ISO_DATE = re.compile(r"(?<!\d)(\d{4})-(\d{2})-(\d{2})(?!\d)")


def rewrite_dates(text: str, view: DateView, row: int) -> str:
    """Show every ISO date inside a text (reasons mention contact dates) the way ``view`` shows case ``row``'s dates.

    Calendar mode leaves the text as it is; relative mode writes "day N" (days since the case's
    first contact); shifted mode applies the case's offset.
    """
    if not text or view.mode == "calendar":
        return text

    def replace(match):
        try:
            day = to_day(dt.date(int(match.group(1)), int(match.group(2)), int(match.group(3))))
        except ValueError:
            return "(date withheld)"
        return view.case_text(row, day)

    return _ISO_DATE.sub(replace, str(text))


def withhold_dates(text: str) -> str:
    """Every ISO date inside a text replaced by "(date withheld)" (a case that has no scored row)."""
    return _ISO_DATE.sub("(date withheld)", str(text))
