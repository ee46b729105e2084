"""Contact dates in timeline files: the one rule for reading them, and hints when they do not read.

``YYYY-MM-DD`` unless the import names a ``strptime`` format (``--date-format %d/%m/%Y``); then
only that format. Dates must fall in :data:`caseview.timeline_io.validate.DATE_RANGE_TEXT`.
A date that does not read gets the option that would read it in its message ("try --date-format
%d/%m/%Y"); both orders are offered when the day and the month cannot be told apart.
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import InputError

FIRST_DAY = -25567   # 1900-01-01 as days since 1970-01-01
LAST_DAY = 84005     # 2199-12-31
_DATE_SHAPE = r"^\d{4}-\d{2}-\d{2}$"
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def parse_dates(texts: np.ndarray, date_format: str | None) -> tuple[np.ndarray, np.ndarray]:
    """Valid flags (n,) and days since 1970-01-01 (n,) of date texts, in :data:`DATE_RANGE_TEXT`.

    The one date rule of timeline files: ``YYYY-MM-DD`` unless ``date_format`` (a ``strptime``
    format such as ``%d/%m/%Y``) is given, and then only that format.
    """
    import pandas as pd

    text = pd.Series(texts, dtype=object)
    if date_format is None:
        shape_ok = text.str.match(_DATE_SHAPE).fillna(False).to_numpy(dtype=bool)
        parsed = pd.to_datetime(text.where(shape_ok, None), format="%Y-%m-%d", errors="coerce")
    else:
        parsed = pd.to_datetime(text.where(text != "", None), format=date_format, errors="coerce", exact=True)
    as_days = parsed.to_numpy(dtype="datetime64[D]")
    valid = ~np.isnat(as_days)
    days = np.where(valid, as_days.astype(np.int64), 0)
    valid &= (days >= FIRST_DAY) & (days <= LAST_DAY)
    return valid, np.where(valid, days, 0)


def check_date_format(date_format: str | None) -> str | None:
    """The format if it names a day, a month and a year (``%d``, ``%m``/``%b``/``%B``, ``%Y``/``%y``)."""
    if date_format is None:
        return None
    fmt = str(date_format)
    has = lambda *codes: any(code in fmt for code in codes)  # noqa: E731
    if not (has("%d") and has("%m", "%b", "%B") and has("%Y", "%y")) or _CONTROL.search(fmt):
        raise InputError(f"--date-format {fmt!r}: expected a strptime format naming the day (%d), the month "
                         "(%m, %b or %B) and the year (%Y or %y), e.g. %d/%m/%Y")
    return fmt


def date_format_text(date_format: str | None) -> str:
    return "YYYY-MM-DD" if date_format is None else f"{date_format} (--date-format)"


_DAY_MONTH_YEAR = re.compile(r"^(\d{1,2})([./-])(\d{1,2})\2(\d{2}|\d{4})$")
_YEAR_MONTH_DAY = re.compile(r"^(\d{4})([./])(\d{1,2})\2(\d{1,2})$")


def date_format_hint(value: str, date_format: str | None) -> str:
    """The option that would read ``value`` (``; try --date-format %d/%m/%Y``), or a plain example."""
    text = str(value).strip()
    m = _DAY_MONTH_YEAR.match(text)
    if m:
        first, sep, second, year = int(m.group(1)), m.group(2), int(m.group(3)), m.group(4)
        y = "%Y" if len(year) == 4 else "%y"
        day_first, month_first = f"%d{sep}%m{sep}{y}", f"%m{sep}%d{sep}{y}"
        if first > 12 and second <= 12:
            options = [day_first]
        elif second > 12 and first <= 12:
            options = [month_first]
        elif first <= 12 and second <= 12:
            options = [day_first, month_first]
        else:
            options = []
        options = [o for o in options if o != date_format]
        if len(options) == 1:
            return f"; try --date-format {options[0]}"
        if len(options) == 2:
            return (f"; try --date-format {options[0]} (day first) or {options[1]} (month first), whichever "
                    "your file uses")
    m = _YEAR_MONTH_DAY.match(text)
    if m and f"%Y{m.group(2)}%m{m.group(2)}%d" != date_format:
        return f"; try --date-format %Y{m.group(2)}%m{m.group(2)}%d"
    if re.fullmatch(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2})?", text):
        seconds = ":%S" if text.count(":") == 2 else ""
        return f"; the date has a time of day: try --date-format '%Y-%m-%d{text[10]}%H:%M{seconds}'"
    if re.fullmatch(r"[1-9]\d{4}(\.0+)?", text) and 1 <= float(text) <= 2_958_465:
        return ("; it looks like an Excel serial day number: import the .xlsx workbook itself (its day numbers "
                "are read as dates) or format the column as dates before saving as CSV")
    if date_format is not None and re.match(_DATE_SHAPE, text):
        return "; the other dates use --date-format, this one is YYYY-MM-DD: write all dates one way"
    if date_format is None:
        return ", e.g. 2025-03-14"
    return ""


