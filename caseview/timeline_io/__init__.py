"""Timeline files: strict import (CSV/XLSX, validated whole, written all or nothing) and export."""

from .exporter import ExportResult, export_timelines, timeline_table
from .importer import ImportResult, import_timelines

__all__ = ["import_timelines", "ImportResult", "export_timelines", "ExportResult", "timeline_table"]
