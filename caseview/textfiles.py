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


#: Deepest nesting of objects and lists accepted in a JSON file (model files nest 4 levels).
MAX_JSON_DEPTH = 32
#: Longest integer literal accepted (digits); 15 digits is every integer a float holds exactly.
MAX_JSON_INTEGER_DIGITS = 15


class _Duplicate(Exception):
    def __init__(self, key):
        self.key = key


class _Object(dict):
    """A decoded JSON object that remembers a key given twice (reported with its JSON path)."""

    duplicate = None


def _object(pairs):
    out = _Object()
    for key, value in pairs:
        if key in out and out.duplicate is None:
            out.duplicate = key
        out[key] = value
    return out


class _Bad:
    """A number the file should not hold (too long an integer, one that overflows, NaN/Infinity)."""

    def __init__(self, text: str, why: str):
        self.text, self.why = text, why


def _integer(text: str):
    digits = text.lstrip("-")
    if len(digits) > MAX_JSON_INTEGER_DIGITS:
        return _Bad(text[:20] + ("..." if len(text) > 20 else ""),
                    f"an integer of {len(digits)} digits (at most {MAX_JSON_INTEGER_DIGITS} are accepted)")
    return int(text)


def _float(text: str):
    value = float(text)
    if value in (float("inf"), float("-inf")):
        return _Bad(text[:20], "a number too large for a floating-point value")
    return value


def _constant(text: str):
    return _Bad(text, "not a number in standard JSON (NaN and Infinity are not allowed)")


def _nesting_too_deep(text: str):
    """(line, column) where objects and lists nest deeper than MAX_JSON_DEPTH, or None (strings skipped)."""
    depth, in_string, escaped, line, start = 0, False, False, 1, 0
    for i, c in enumerate(text):
        if in_string:
            if escaped:
                escaped = False
            elif c == "\\":
                escaped = True
            elif c == '"':
                in_string = False
        elif c == '"':
            in_string = True
        elif c in "[{":
            depth += 1
            if depth > MAX_JSON_DEPTH:
                return line, i - start + 1
        elif c in "]}":
            depth -= 1
        if c == "\n":
            line, start = line + 1, i + 1
    return None


def _find_problem(value, path: str):
    """(JSON path, message) of the first duplicate key or bad number, depth first, or None."""
    if isinstance(value, _Bad):
        return path or "(top level)", f"{value.text}: {value.why}"
    if isinstance(value, dict):
        if getattr(value, "duplicate", None) is not None:
            key = value.duplicate
            return (f"{path}.{key}" if path else key), (f"the key {key!r} is given twice in one object; "
                                                        "remove one (caseview never picks one silently)")
        for key, item in value.items():
            found = _find_problem(item, f"{path}.{key}" if path else str(key))
            if found:
                return found
    elif isinstance(value, list):
        for i, item in enumerate(value):
            found = _find_problem(item, f"{path}[{i}]")
            if found:
                return found
    return None


def _plain(value):
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


def decode_json(text: str, source: str):
    """The JSON value in ``text``, strictly: a syntax error names ``source``, line and column; a key
    given twice in one object, an integer longer than :data:`MAX_JSON_INTEGER_DIGITS` digits, a
    number that overflows, NaN/Infinity, or nesting deeper than :data:`MAX_JSON_DEPTH` are refused
    with the JSON path of the value (``transitions[2].rate``) instead of being read silently."""
    deep = _nesting_too_deep(text)
    if deep is not None:
        raise InputError(f"{source}: line {deep[0]}, column {deep[1]}: objects and lists nest more than "
                         f"{MAX_JSON_DEPTH} levels deep; this is not a caseview file")
    try:
        value = json.loads(text, object_pairs_hook=_object, parse_int=_integer, parse_float=_float,
                           parse_constant=_constant)
    except json.JSONDecodeError as exc:
        raise InputError(f"{source}: line {exc.lineno}, column {exc.colno}: not valid JSON ({exc.msg})") from None
    except (RecursionError, ValueError) as exc:
        raise InputError(f"{source}: not valid JSON ({type(exc).__name__})") from None
    problem = _find_problem(value, "")
    if problem is not None:
        raise InputError(f"{source}: {problem[0]}: {problem[1]}")
    return _plain(value)


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
