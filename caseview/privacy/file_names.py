"""File names as the append-only audit trail keeps them (a name may hold an identifier)."""

from __future__ import annotations

__all__ = ["audited_file_name"]


def audited_file_name(name: str, sha256: str) -> str:
    """The file name as the audit trail keeps it: the name itself, or ``file <sha256 prefix><suffix>
    (name withheld)`` when the name may hold an identifier (the trail is append-only: nothing written
    there can be removed). Withheld: anything the identifier screen flags in the name, two capitalised
    words in a row (``Mary Smith visits.csv``; a harmless false alarm for ``Team Export.csv``), and
    control characters. The SHA-256 in the entry still identifies the file exactly."""
    import re
    from pathlib import PurePath

    from . import screen_value

    stem, suffix = PurePath(name).stem, PurePath(name).suffix
    words = re.sub(r"[_.]+", " ", stem)
    flagged = (screen_value(stem, "other") or screen_value(words, "other")
               or re.search(r"\b[A-Z][a-z]+[\s_.-]+[A-Z][a-z]+\b", stem))
    if flagged or not name.isprintable():
        return f"file {sha256[:12]}{suffix if suffix.isascii() and suffix.isprintable() else ''} (name withheld)"
    return name
