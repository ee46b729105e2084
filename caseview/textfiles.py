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
