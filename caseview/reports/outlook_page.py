"""The report's outlook: a PDF page (chart and a 3/6/12-month table) and the rows of the XLSX Outlook sheet.

The numbers are the same :class:`caseview.followup.outlook.Outlook` that ``caseview outlook`` and
the window's Outlook tab show (:func:`caseview.operations.outlook.outlook_from_scores`, on the
report's own scores). With de-identified dates the month ends are given as months after the
as-of date.
"""

from __future__ import annotations

from . import style
from .layout import Column, Page
from .outlook_chart import draw_follow_up, draw_stages

HORIZONS = (3, 6, 12)


def collect_outlook(scores, version, as_of, coordinator=None) -> tuple:
    """``(outlook or None, note)`` for the report: referrals estimated, bands given the model."""
    from caseview.errors import InputError
    from caseview.operations.outlook import outlook_from_scores

    try:
        return outlook_from_scores(scores, version, as_of, 12, "auto", "none", coordinator=coordinator), ""
    except InputError as exc:
        try:
            outlook = outlook_from_scores(scores, version, as_of, 12, "none", "none", coordinator=coordinator)
        except InputError as again:
            return None, f"No outlook: {again}"
        return outlook, f"New referrals left out: {str(exc).split(': ', 1)[-1]}"


def _month_label(outlook, t: int, relative: bool) -> str:
    return f"+{t + 1} months" if relative else outlook.dates[t].isoformat()


def _count(outlook, t: int, c: int) -> str:
    return f"{outlook.expected[t, c]:,.1f} ({outlook.lower_95[t, c]:,.0f}–{outlook.upper_95[t, c]:,.0f})"


def outlook_page(data) -> Page:
    """The PDF page: what is assumed, the two charts and the table at 3, 6 and 12 months."""
    from caseview.operations.outlook import outlook_notes

    page = Page("caseload outlook")
    page.heading("Caseload outlook: expected open cases in each stage", gap_before=0.0)
    outlook = data.outlook
    if outlook is None:
        page.paragraph(data.outlook_note or "No outlook could be worked out for this caseload.")
        return page
    relative = data.dates.deidentified
    for line in [n for n in outlook_notes(outlook, withhold_dates=relative) + [data.outlook_note] if n]:
        page.paragraph(line, size=style.BODY_SIZE - 1.5, colour=style.MUTED, gap_after=0.04)
    page.cursor += 0.25
    draw_stages(page.axes(2.6, right_pad=1.9), outlook, size=style.SMALL_SIZE, relative=relative)
    page.cursor += 0.7 if relative else 0.55
    draw_follow_up(page.axes(1.4, right_pad=1.9), outlook, size=style.SMALL_SIZE, relative=relative)
    page.cursor += 0.5
    picks = [m - 1 for m in HORIZONS if m <= len(outlook.dates)]
    page.heading("Expected count (95% band) and entries during the month", size=style.BODY_SIZE + 1)
    columns = [Column("stage", 2.0)] + [Column(_month_label(outlook, t, relative), 1.75, "right") for t in picks]
    rows = [[name] + [_count(outlook, t, c) for t in picks] for c, name in enumerate(outlook.rows)]
    rows.append(["entries into follow-up stages"] + [f"{outlook.entries_expected[t, -1]:,.1f}" for t in picks])
    left = page.table(columns, rows, size=style.TABLE_SIZE)
    if left:   # never silently short: say what did not fit (it is all in the XLSX Outlook sheet)
        page.paragraph(f"{len(left)} more row(s) in the XLSX report's Outlook sheet.", size=style.SMALL_SIZE)
    return page


def outlook_sheet(data) -> tuple:
    """``(columns, rows)`` of the XLSX Outlook sheet: the outlook CSV's columns, then the assumptions."""
    from caseview.operations.outlook import outlook_notes, outlook_table

    outlook = data.outlook
    if outlook is None:
        return ["note"], [[data.outlook_note or "No outlook could be worked out."]]
    header, columns = outlook_table(outlook)
    rows = [list(r) for r in zip(*columns)]
    if data.dates.deidentified:
        index = {d.isoformat(): f"+{t + 1} months" for t, d in enumerate(outlook.dates)}
        for r in rows:
            r[0] = index[r[0]]
    for r in rows:
        r[2:6] = [float(v) for v in r[2:6]]
    notes = outlook_notes(outlook, withhold_dates=data.dates.deidentified) + \
        ([data.outlook_note] if data.outlook_note else [])
    rows += [[""] * len(header)] + [["note", n] + [""] * (len(header) - 2) for n in notes]
    return header, rows
