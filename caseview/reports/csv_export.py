"""The per-case stage summary as CSV (one header row, one row per case; ``pandas.read_csv`` reads it).

The last column, ``advisory``, carries the caution on every row so it travels with the data.
Formula-like text is escaped with a leading apostrophe; dates are ISO 8601 (YYYY-MM-DD), or
integers (days since the case's first contact) in relative mode; blank means "none".
"""

from __future__ import annotations

import csv
import datetime as dt

from caseview import ADVISORY_NOTICE

from .records import case_columns, case_records, escape_text

#: Columns of the spreadsheet's Cases sheet left out of the CSV to keep it a compact stage summary
#: (the plain-language ``reasons`` and the latest ``review_note`` stay: text columns after the numbers).
_DROP = ("horizon_days", "n_contacts", "reviewed_by", "reviewed_at", "reviewed_at_day_relative")


def _text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, float):
        return f"{value:.6f}"
    return str(escape_text(value)) if isinstance(value, str) else str(value)


def write_csv(data, path) -> int:
    """Write the CSV; returns the number of case rows."""
    columns = case_columns(data)
    keep = [j for j, name in enumerate(columns) if name not in _DROP]
    records = case_records(data)
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow([escape_text(columns[j]) for j in keep] + ["advisory"])
        for values in records:
            writer.writerow([_text(values[j]) for j in keep] + [ADVISORY_NOTICE])
    return len(records)
