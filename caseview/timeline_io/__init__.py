"""Timeline files: strict import (CSV/XLSX, validated whole, written all or nothing) and export.

The names below are loaded on first use, so that a command needing only a small part of the package
(``case_ids`` for finding a case) does not load the importer and exporter (issue 19: ``caseview history``
within 0.3 s).
"""

import importlib

_HOMES = {"import_timelines": "importer", "ImportResult": "importer", "export_timelines": "exporter",
          "ExportResult": "exporter", "timeline_table": "exporter"}

__all__ = ["import_timelines", "ImportResult", "export_timelines", "ExportResult", "timeline_table"]


def __getattr__(name):
    if name in _HOMES:
        value = getattr(importlib.import_module(f"{__name__}.{_HOMES[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
