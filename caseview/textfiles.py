"""Reading small UTF-8 text files (model files, rule files) with one-line, specific errors."""

from __future__ import annotations

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
