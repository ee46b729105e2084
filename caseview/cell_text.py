"""Text cells for spreadsheets: the one place where formula-like text is neutralised.

A spreadsheet program runs a cell that starts with ``=``, ``+``, ``-`` or ``@`` as a formula
(OWASP "CSV Injection"; tab and carriage return are included as OWASP recommends). Every CSV and
XLSX writer of caseview passes its text cells, headers included, through :func:`neutralise`,
which puts an apostrophe in front of such text so the program shows it instead of running it.
Writers whose numbers arrive already formatted as text (the command line's CSV tables) pass
``keep_numbers=True``: a cell that is a plain number (``-0.5``, ``+3``, ``-1e-05``) is a number,
not a formula, and stays as it is, so negative covariates stay numbers.
"""

from __future__ import annotations

import re

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def neutralise(value, keep_numbers: bool = False):
    """``value`` with an apostrophe in front when it is text a spreadsheet would run as a formula.

    Non-text values pass through unchanged (numbers stay numbers); with ``keep_numbers`` so does
    text that is a plain number.
    """
    if isinstance(value, str) and value.startswith(FORMULA_START) and not (keep_numbers and _NUMBER.fullmatch(value)):
        return "'" + value
    return value


_RISKY_AFTER_SEPARATOR = tuple("\x00" + mark for mark in FORMULA_START)


def risky_joined(joined: str) -> bool:
    """True when some cell of ``"\x00".join(cells)`` starts like a formula (then check cell by cell).

    Six substring searches (memory speed) instead of a regular expression tried at every position.
    """
    return joined.startswith(FORMULA_START) or any(mark in joined for mark in _RISKY_AFTER_SEPARATOR)


def neutralise_all(values, keep_numbers: bool = False) -> list:
    """:func:`neutralise` over a sequence of text cells (one pass over the joined text when clean)."""
    values = values if isinstance(values, list) else list(values)
    try:
        joined = "\x00".join(values)
    except TypeError:
        return [neutralise(v, keep_numbers) for v in values]
    if not risky_joined(joined):
        return values
    return [neutralise(v, keep_numbers) for v in values]
