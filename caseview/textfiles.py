"""Reading small UTF-8 text files (model, rule and staff-estimate files) with one-line, specific errors."""

from __future__ import annotations

import json
from pathlib import Path

from .errors import InputError


def read_utf8_text(path, what: str) -> str:
    """The text of ``path`` (UTF-8, optional BOM); ``what`` names the file in messages ("model file")."""
    path = Path(path)
    try:
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: {what} not found") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text (byte {exc.start}); save the {what} as UTF-8") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read {what} ({exc.strerror})") from None


def decode_json(text: str, source: str):
    """The JSON value in ``text``; a syntax error names ``source``, line and column."""
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{source}: line {exc.lineno}, column {exc.colno}: not valid JSON ({exc.msg})") from None


_LINE_BREAKING = {"\u2028", "\u2029", "\u0085"}


def _control(c: str) -> bool:
    import unicodedata

    return c in _LINE_BREAKING or unicodedata.category(c) in ("Cc", "Cf")


def check_one_line(value, what: str) -> str:
    """``value`` if it is one line of visible text; InputError naming ``what`` otherwise.

    Refused: line breaks, tabs and every other control or invisible formatting character (Unicode
    categories Cc and Cf, and the line and paragraph separators), which could make a listing such
    as ``caseview audit show`` print a line that looks like another entry.
    """
    text = "" if value is None else str(value)
    if text.isascii() and text.isprintable():
        return text
    bad = next((c for c in text if _control(c)), None)
    if bad is not None:
        raise InputError(f"{what}: contains a control character (U+{ord(bad):04X}, at position "
                         f"{text.index(bad) + 1}); expected one line of plain text without tabs or line breaks")
    return text


def printable(value) -> str:
    """Text for a one-line listing: control and invisible characters shown as escapes (``\\n``, ``\\t``,
    ``\\u202e``), so stored text can never forge another line or column of the listing."""
    text = "" if value is None else str(value)
    if text.isascii() and text.isprintable():
        return text
    out = []
    for c in text:
        if _control(c):
            out.append({"\n": "\\n", "\t": "\\t", "\r": "\\r"}.get(c, f"\\u{ord(c):04x}"))
        else:
            out.append(c)
    return "".join(out)
