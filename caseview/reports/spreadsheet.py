"""The XLSX workbook (openpyxl): sheets Summary, Cases, Flags, Reviews and Notes.

Row 1 of every sheet is the advisory caution; row 2 holds the column headers; both are frozen.
Numbers are stored as numbers, calendar dates as dates (relative days as integers), and any text
that starts like a formula is escaped with a leading apostrophe so it is never run.
"""

from __future__ import annotations

import datetime as dt

from caseview import ADVISORY_NOTICE, __version__

from .deidentify import rewrite_dates
from caseview.followup.wording import CHANCE_BANDS, points

from .records import (case_columns, case_records, contact_day, escape_text, not_scored_records, reason_text,
                      review_note, review_records)
from .model_summary import NOT_FITTED

_HEADER_FILL = "DDEAF5"   # pale tint of Okabe-Ito blue
_CAUTION_FILL = "FFF4D6"  # pale tint of Okabe-Ito orange


def _cell(ws, value, font=None, fill=None, alignment=None):
    """One styled streamed cell (caution, headers, dates): text never becomes a formula.

    Body numbers are written plain (General format shows them in full); a styled cell per number
    would double the time of a 100,000-case workbook.
    """
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.cell.cell import TYPE_STRING

    if isinstance(value, str):
        cell = WriteOnlyCell(ws, value=escape_text(value))
        cell.data_type = TYPE_STRING    # never a formula, whatever the text
    else:
        cell = WriteOnlyCell(ws, value=value)
        if isinstance(value, dt.date):
            cell.number_format = "yyyy-mm-dd"
        elif isinstance(value, float):
            cell.number_format = "0.000"
    for name, style in (("font", font), ("fill", fill), ("alignment", alignment)):
        if style is not None:
            setattr(cell, name, style)
    return cell


def _plain(value):
    """A body value as written: text escaped (a str never starts like a formula after escaping)."""
    return escape_text(value) if isinstance(value, str) else value


def _sheet(book, title: str, columns: list, rows: list, widths: dict | None = None):
    """A streamed (write-only) sheet: caution in row 1, headers in row 2, then ``rows``.

    Write-only keeps memory flat at any caseload size: rows go to the file as they are appended.
    Column widths and frozen panes are set before the first row, as streaming requires.
    """
    from openpyxl.styles import Alignment, Font, PatternFill

    from openpyxl.utils import get_column_letter

    ws = book.create_sheet(title)
    ws.freeze_panes = "B3" if len(columns) > 1 else "A3"
    for j, name in enumerate(columns, start=1):
        longest = max([len(str(name))] + [len(str(r[j - 1])) for r in rows[:200] if r[j - 1] is not None])
        width = (widths or {}).get(name, min(max(10, longest + 2), 60))
        ws.column_dimensions[get_column_letter(j)].width = width
    ws.append([_cell(ws, ADVISORY_NOTICE, font=Font(bold=True), fill=PatternFill("solid", fgColor=_CAUTION_FILL))])
    bold, header_fill = Font(bold=True), PatternFill("solid", fgColor=_HEADER_FILL)
    wrap = Alignment(wrap_text=True, vertical="top")
    ws.append([_cell(ws, name, font=bold, fill=header_fill, alignment=wrap) for name in columns])
    for values in rows:
        ws.append([_cell(ws, v) if isinstance(v, dt.date) else _plain(v) for v in values])
    return ws


def _summary_rows(data) -> list:
    rows = [["report", "caseview caseload report"],
            ["as_of", data.as_of if not data.dates.deidentified else data.dates.report_date_text(data.as_of)],
            ["dates", data.dates.mode],
            ["coordinator", data.coordinator or "all"],
            ["horizon_days", data.horizon_days],
            ["cases_in_scope", int(data.rows.size)],
            ["cases_listed", int(data.listed_rows.size)],
            ["flagged", int(data.flagged_rows.size)],
            ["reviews_done", data.reviews_done],
            ["reviews_outstanding", data.reviews_outstanding]]
    if data.not_scored:
        rows.append(["cannot_be_scored", len(data.not_scored)])
    for k, stage in enumerate(data.stages):
        rows.append([f"most likely stage now: {stage}", int(data.stage_counts[k])])
    for k, stage in enumerate(data.stages):
        rows.append([f"expected number now: {stage}", float(data.expected_now[k])])
    for k, stage in enumerate(data.stages):
        rows.append([f"expected number at horizon: {stage}", float(data.expected_at_horizon[k])])
    c = data.changes
    if c is not None:
        rows += [["changes_since", c.since if not data.dates.deidentified else
                  f"{(data.as_of - c.since).days} days before the as-of date"],
                 ["newly_flagged", "; ".join(c.newly_flagged)],
                 ["no_longer_flagged", "; ".join(c.no_longer_flagged)],
                 ["stage_changes", "; ".join(f"{a}: {b} -> {d}" for a, b, d in c.stage_changes)],
                 ["new_cases", "; ".join(c.new_cases)]]
    m = data.model
    rows += [["model", m.name], ["model_version", m.version_id if m.version_id is not None else ""],
             ["model_fitted", "yes" if m.fitted else f"no ({NOT_FITTED})"]]
    rows += [[f"fit: {label}", value] for label, value in m.statistics]
    rows += [[f"unscheduled contacts per year: {r.stage}", round(r.per_year, 3)] for r in m.unscheduled_per_year]
    rows += [["audit_chain_head", data.audit_head], ["made_by", f"caseview {__version__}"]]
    return rows


def _flag_rows(data) -> tuple:
    a, s, view = data.assessment, data.scores, data.dates
    columns = ["case_id", "coordinator", "rule", "message", "value", "threshold", "recent_contacts_effect",
               view.column_name("next_contact_due"), "review_status", "review_note"]
    rows = []
    for r in data.flagged_rows:
        r = int(r)
        due = int(a.next_contact_due_day[r])
        due_value = view.case_value(r, due if due >= 0 else None)
        status = str(a.review_status[r] or "") or "not reviewed"
        note = review_note(data, r)
        reasons = list(a.reasons[r])
        if not reasons:
            rows.append([str(s.case_ids[r]), str(s.coordinators[r] or ""), str(a.flags[r]), reason_text(data, r),
                         None, None, "", due_value, status, note])
        for reason in reasons:
            value, threshold = reason.value, reason.threshold
            contacts = " ".join(
                f"The contact on {view.case_text(r, contact_day(c))}"
                + (f" ({c.evidence.replace('=', ' ')})" if c.evidence else "")
                + (f" {'raised' if c.change > 0 else 'lowered'} it by {points(c.change)}."
                   if abs(c.change) >= 0.005 else " changed it by less than 1 point.")
                for c in reason.contacts)
            rows.append([str(s.case_ids[r]), str(s.coordinators[r] or ""), reason.rule,
                         rewrite_dates(reason.message, view, r),
                         float(value) if isinstance(value, (int, float)) else None,
                         float(threshold) if isinstance(threshold, (int, float)) else None,
                         contacts, due_value, status, note])
    return columns, rows


def write_xlsx(data, path) -> int:
    """Write the workbook; returns the number of case rows on the Cases sheet."""
    from openpyxl import Workbook

    book = Workbook(write_only=True)
    _sheet(book, "Summary", ["item", "value"], _summary_rows(data), widths={"item": 38, "value": 48})
    columns = case_columns(data)
    records = case_records(data) + not_scored_records(data)
    _sheet(book, "Cases", columns, records, widths={"reasons": 60})
    _sheet(book, "Flags", *_flag_rows(data), widths={"message": 50, "recent_contacts_effect": 60})
    _sheet(book, "Reviews", *review_records(data))
    from .outlook_page import outlook_sheet

    _sheet(book, "Outlook", *outlook_sheet(data), widths={"stage": 26, "advisory": 40})
    notes = [["caution", ADVISORY_NOTICE],
             ["probabilities", "p_<stage>: probability of each stage on the as-of date; _at_horizon: the same "
                               "after the horizon if nothing new is observed."],
             ["p_reach_follow_up", "Probability of being in a follow-up stage at least once before the horizon."],
             ["next_contact_due", "Day the next contact is due: the chance of a follow-up stage would reach the "
                                  "rule threshold with no new contact, at the latest 16 weeks after the last "
                                  "contact. A day before the as-of date means overdue."],
             ["reasons", "Plain sentences; the numbers are also in their own columns (value, threshold, "
                         "p_ columns). Chance words are caseview's own bands: "
                         + "; ".join(f"{w} from {lo * 100:.0f}%" for lo, w in CHANCE_BANDS) + "."],
             ["review_note", "The latest supervisor review note (left out of de-identified reports)."]]
    if data.dates.caveat():
        notes.append(["dates", data.dates.caveat()])
    _sheet(book, "Notes", ["topic", "note"], notes, widths={"topic": 22, "note": 100})
    book.properties.title = "caseview caseload report"
    book.properties.creator = "caseview"
    from caseview.private_files import save_workbook

    save_workbook(book, path)  # no traceback from openpyxl on a full disk
    return len(records)
