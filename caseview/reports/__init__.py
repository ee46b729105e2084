"""Team-meeting reports and exports: PDF (charts and tables), XLSX workbook, CSV stage summary.

:func:`build_report` is the one entry point (used by ``caseview report`` and the window's export
dialog, which calls it in a worker): it assesses the caseload, writes the file chosen by its
extension, and records the report in the workspace's audit trail. Everything in a report is
advisory; every page and sheet carries :data:`caseview.ADVISORY_NOTICE`.

Sharing outside the team: ``dates="relative"`` (days since each case's first contact; safer) or
``dates="shifted"`` (a random offset per case; NOT Safe Harbor de-identification). See
:mod:`caseview.reports.deidentify`.
"""

from __future__ import annotations

import datetime as dt
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from caseview.errors import InputError

FORMATS = {".pdf": "pdf", ".xlsx": "xlsx", ".csv": "csv"}

__all__ = ["FORMATS", "ReportResult", "build_report", "report_format"]


@dataclass(frozen=True)
class ReportResult:
    """What :func:`build_report` made.

    Attributes
    ----------
    path : pathlib.Path
    format : str  ("pdf", "xlsx" or "csv")
    count : int
        Pages (PDF) or case rows (XLSX Cases sheet, CSV).
    audit_head : str
        The audit chain head printed inside the report (the newest entry before the report's own).
    sha256 : str
        Hash of the written file (also in the audit entry).
    entry_id, entry_hash : int, str
        The report's own audit entry (it cannot be inside the report: it holds the report's hash);
        ``entry_hash`` is the chain head after the report was recorded.
    not_scored : list
        ``(case_id, coordinator, reason)`` of the cases in scope that cannot be scored (marked in
        the report, left out of its figures).
    """

    path: Path
    format: str
    count: int
    audit_head: str
    sha256: str
    entry_id: int = 0
    entry_hash: str = ""
    not_scored: list = field(default_factory=list)

    @property
    def n_pages(self) -> int | None:
        return self.count if self.format == "pdf" else None

    @property
    def n_rows(self) -> int | None:
        return None if self.format == "pdf" else self.count


def report_format(path) -> str:
    """"pdf", "xlsx" or "csv" from the file extension, else InputError."""
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise InputError(f"report file {path}: unknown report type {suffix or '(no extension)'!r}; "
                         f"expected a file name ending in .pdf, .xlsx or .csv")
    return FORMATS[suffix]


def _as_date(value, what: str) -> dt.date | None:
    if value is None or isinstance(value, dt.date):
        return value
    from caseview.dates import parse_date

    return parse_date(str(value), what)


def _default_actor() -> str:
    from caseview.attribution import os_user

    return os_user()


def build_report(ws, as_of, out_path, *, horizon_days: float = 90, coordinator: str | None = None,
                 flagged_only: bool = False, since=None, dates: str = "calendar", seed=None,
                 actor: str | None = None, callback=None, assess=None, include_closed: bool = False) -> ReportResult:
    """Write a report and record it in the audit trail.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    as_of : datetime.date or str (YYYY-MM-DD)
    out_path : str or Path
        ``.pdf``, ``.xlsx`` or ``.csv``; the file is written to a temporary name beside it and
        moved into place only when complete, so a failure never leaves a half-written report.
    horizon_days, coordinator, flagged_only, since, dates, seed
        See :func:`caseview.reports.data.collect_report_data`.
    actor : str, optional
        Who made the report (audit trail); default the login name.
    callback : callable(fraction), optional
        Progress; raise from it to cancel.
    assess : callable, optional
        Replacement for :func:`caseview.followup.assess_caseload` (tests).
    include_closed : bool
        Also report cases closed on or before the as-of date (left out by default).
    """
    from .data import collect_report_data

    out_path = Path(out_path)
    kind = report_format(out_path)
    as_of = _as_date(as_of, "as-of date")
    since = _as_date(since, "changes since")
    if not out_path.parent.exists():
        raise InputError(f"report file {out_path}: folder {out_path.parent} does not exist")
    progress = callback or (lambda fraction: None)
    data = collect_report_data(ws, as_of, horizon_days=float(horizon_days), coordinator=coordinator,
                               flagged_only=flagged_only, since=since, dates=dates, seed=seed, assess=assess,
                               include_closed=include_closed,
                               callback=lambda f: progress(0.7 * f))
    from caseview.private_files import private_output

    with private_output(out_path) as temporary:  # 0600, moved into place only when complete
        if kind == "pdf":
            from .pdf import write_pdf as writer
        elif kind == "xlsx":
            from .spreadsheet import write_xlsx as writer
        else:
            from .csv_export import write_csv as writer
        count = writer(data, temporary)
        progress(0.95)
        digest = hashlib.sha256(Path(temporary).read_bytes()).hexdigest()
        details = {"format": kind, "as_of": as_of.isoformat(), "options": data.options, "sha256": digest,
                   "count": int(count), "audit_head_in_report": data.audit_head}
        if data.not_scored:
            details["cannot_be_scored"] = len(data.not_scored)
        from caseview.privacy.file_names import audited_file_name

        entry = ws.audit_append(actor or _default_actor(), "report.create",
                                audited_file_name(out_path.name, digest), details)
    progress(1.0)
    return ReportResult(out_path, kind, int(count), data.audit_head, digest, entry.id, entry.entry_hash,
                        list(data.not_scored))
