"""The team-meeting PDF: A4 portrait pages laid out on matplotlib figures, saved with PdfPages.

Pages: cover summary; caseload stage occupancy over time; flagged cases (table, continued over as
many pages as needed); small timelines of the flagged cases (at most :data:`MAX_TIMELINES`);
model summary and audit chain head. Every page carries the as-of date, "page i of n" and the
advisory caution. Text is embedded as TrueType (``pdf.fonttype`` 42) so it can be searched and
extracted.
"""

from __future__ import annotations

import io

import numpy as np

from caseview import ADVISORY_NOTICE, __version__
from caseview.followup.wording import plural

from . import charts, style
from .data import case_history
from .layout import MARGIN, Column, Page
from .model_summary import NOT_FITTED
from .records import review_note, short_reasons

#: Most flagged cases drawn as small timelines (the rest are named as left out).
MAX_TIMELINES = 24
#: Most flagged cases listed in the PDF's table, most urgent first; a regional caseload can flag tens of
#: thousands, which no meeting reads on paper. The report says how many are left out and where every one
#: is listed (the XLSX or CSV report, or a report narrowed with --coordinator).
MAX_LISTED_FLAGGED = 250
TIMELINES_PER_PAGE = 6
_LIST_LIMIT = 40


#: Cases that cannot be scored named on the cover (the rest are counted).
_NOT_SCORED_LISTED = 5


def _pct(p: float) -> str:
    return f"{100 * p:.0f}%"


def _id_list(ids: list, limit: int = _LIST_LIMIT) -> str:
    if not ids:
        return "none"
    shown = ", ".join(ids[:limit])
    return shown + (f" and {len(ids) - limit} more" if len(ids) > limit else "")


def _scope(data) -> str:
    parts = [f"coordinator {data.coordinator}" if data.coordinator else "all coordinators",
             f"horizon {data.horizon_days:g} days"]
    if data.flagged_only:
        parts.append("flagged cases listed only")
    return " · ".join(parts)


def _cover(data) -> Page:
    page = Page("summary")
    s = data.scores
    page.text(MARGIN, page.cursor, "Caseload report", size=style.TITLE_SIZE, weight="bold")
    page.cursor += 0.4
    page.paragraph(f"{_scope(data)} · model: {data.model.name}", colour=style.MUTED)
    page.caution_box(ADVISORY_NOTICE + (" " + data.dates.caveat() if data.dates.caveat() else ""))
    figures = [("cases in scope", data.rows.size), ("flagged", data.flagged_rows.size),
               ("reviews done", data.reviews_done), ("reviews outstanding", data.reviews_outstanding)]
    width = (page.content_width - 0.3) / 4
    for i, (label, value) in enumerate(figures):
        x = MARGIN + i * (width + 0.1)
        page.box(x, page.cursor, width, 0.8, style.STRIPE)
        page.text(x + width / 2, page.cursor + 0.1, f"{value}", size=20, weight="bold", ha="center")
        page.text(x + width / 2, page.cursor + 0.52, label, size=style.BODY_SIZE - 1, colour=style.MUTED,
                  ha="center")
    page.cursor += 1.0
    page.heading("Cases by most likely stage now")
    colours = style.stage_colours(len(data.stages))
    columns = [Column("", 0.22), Column("stage", 1.98), Column("cases (most likely stage)", 1.3, "right"),
               Column("share", 0.8, "right"), Column("expected number now", 1.4, "right"),
               Column(f"expected in {data.horizon_days:g} days", 1.45, "right")]
    rows = []
    for k, stage in enumerate(data.stages):
        rows.append([("■", colours[k]), stage, str(int(data.stage_counts[k])),
                     _pct(data.stage_counts[k] / max(1, data.rows.size)), f"{data.expected_now[k]:.1f}",
                     f"{data.expected_at_horizon[k]:.1f}"])
    page.table(columns, rows, size=style.BODY_SIZE - 0.5)
    page.paragraph("Expected numbers add up each case's stage probabilities; forecasts assume no new contact.",
                   size=style.SMALL_SIZE + 0.5, colour=style.MUTED)
    c = data.changes
    if c is not None:
        when = data.dates.report_date_text(c.since, "previous")
        if not data.dates.deidentified:
            when = c.since.isoformat()
        page.heading(f"Changes since {when}" if not data.dates.deidentified
                     else f"Changes since the previous date ({(data.as_of - c.since).days} days earlier)")
        moved = [f"{cid} {a} → {b}" for cid, a, b in c.stage_changes]
        for label, text in (
                (f"Newly flagged ({len(c.newly_flagged)})", _id_list(c.newly_flagged)),
                (f"No longer flagged ({len(c.no_longer_flagged)})", _id_list(c.no_longer_flagged)),
                (f"Most likely stage changed ({len(moved)})", _id_list(moved, 16)),
                (f"New cases ({len(c.new_cases)})", _id_list(c.new_cases))):
            page.text(MARGIN, page.cursor, label, size=style.BODY_SIZE - 0.5, weight="bold")
            page.cursor += 0.19
            page.paragraph(text, size=style.BODY_SIZE - 1, indent=0.2)
    else:
        page.heading("Changes since the previous date")
        page.paragraph("Not requested (use --since to compare with an earlier date).", colour=style.MUTED)
    page.heading("Reviews")
    page.paragraph(f"{plural(data.flagged_rows.size, 'flagged case')}: {data.reviews_done} reviewed by a supervisor "
                   f"(acknowledged, actioned or dismissed), {data.reviews_outstanding} outstanding. "
                   f"Scored {plural(s.n_cases, 'case')} in the workspace in total.")
    if data.flagged_rows.size > MAX_LISTED_FLAGGED:
        page.caution_box(f"This PDF lists the {MAX_LISTED_FLAGGED:,} most urgent flagged cases. "
                         + _left_out_note(int(data.flagged_rows.size) - MAX_LISTED_FLAGGED))
    if data.not_scored:
        shown = data.not_scored[:_NOT_SCORED_LISTED]
        more = len(data.not_scored) - len(shown)
        page.caution_box(f"{len(data.not_scored)} case(s) cannot be scored and are in none of the figures; "
                         "correct their records: " + "; ".join(f"{c}: {r}" for c, _, r in shown)
                         + (f"; and {more} more (all in the spreadsheet and CSV)." if more else "."))
    return page


def _occupancy_page(data) -> Page:
    page = Page("caseload over time")
    page.heading("Expected stage occupancy of the caseload", gap_before=0.0)
    page.paragraph("Each band is the mean probability of that stage over the cases in scope: before the as-of "
                   "date, as estimated on each day from the contacts recorded up to that day; after it, the "
                   "forecast if nothing new is observed (veiled).", size=style.BODY_SIZE - 0.5,
                   colour=style.MUTED)
    page.cursor += 0.25
    ax = page.axes(4.3)
    charts.caseload_occupancy(ax, data.occupancy, data.stages, None if data.dates.deidentified
                              else int(data.scores.as_of_day))
    page.cursor += 1.0
    page.heading("Expected number of cases by stage")
    o = data.occupancy
    picks = [int(np.argmin(np.abs(o.days_from_as_of - d))) for d in (o.days_from_as_of[0], 0, o.days_from_as_of[-1])]
    labels = [f"{o.days_from_as_of[i]:+.0f} days" if o.days_from_as_of[i] else "as-of" for i in picks]
    columns = [Column("stage", 2.5)] + [Column(f"{lab} (share)", 1.5, "right") for lab in labels]
    rows = [[stage] + [f"{o.mean_probabilities[i, k] * o.n_cases[i]:.1f} ({_pct(o.mean_probabilities[i, k])})"
                       for i in picks] for k, stage in enumerate(data.stages)]
    rows.append(["cases averaged"] + [str(int(o.n_cases[i])) for i in picks])
    page.table(columns, rows, size=style.BODY_SIZE - 0.5)
    return page


def _flag_rows(data) -> list:
    a, s, view = data.assessment, data.scores, data.dates
    rows = []
    for r in data.flagged_rows[:MAX_LISTED_FLAGGED]:
        r = int(r)
        k = int(s.most_likely_stage[r])
        due = int(a.next_contact_due_day[r])
        if due < 0:
            due_text = "no date"
        elif due < s.as_of_day:
            due_text = f"overdue by {plural(s.as_of_day - due, 'day')}"
        elif due == s.as_of_day:
            due_text = "due today"
        else:
            due_text = f"{view.case_text(r, due)} (in {plural(due - s.as_of_day, 'day')})"
        status = str(a.review_status[r] or "") or "not reviewed"
        who = str(a.reviewed_by[r] or "")
        note = review_note(data, r)
        who = who + (f": “{note}”" if note else "")
        rows.append([str(s.case_ids[r]), str(s.coordinators[r] or ""), f"{data.stages[k]} {_pct(s.p_now[r, k])}",
                     _pct(s.p_follow_up_now[r]), _pct(s.p_reach_follow_up[r]), short_reasons(data, r), due_text,
                     status + (f" by {who}" if who else "")])
    return rows


def _left_out_note(left_out: int) -> str:
    verb = "is" if left_out == 1 else "are"
    return (f"{plural(left_out, 'more flagged case')} {verb} not listed in this PDF. Every flagged case is in the "
            "spreadsheet or CSV report (caseview report ... --out FILE.xlsx), or list one coordinator's cases with "
            "--coordinator. Do not take a case's absence here to mean it needs no follow-up.")


def _flag_pages(data) -> list:
    columns = [Column("case", 0.82), Column("coord.", 0.46), Column("most likely stage now", 1.12),
               Column("chance in follow-up now", 0.64, "right"),
               Column(f"chance to reach it in {data.horizon_days:g} days", 0.68, "right"),
               Column("reasons", 2.26), Column("next contact due", 0.66), Column("review", 0.53)]
    rows = _flag_rows(data)
    left_out = int(data.flagged_rows.size) - len(rows)
    pages = []
    while True:
        page = Page("flagged cases")
        count = f"{len(rows)}" if not left_out else f"the {len(rows):,} most urgent of {data.flagged_rows.size:,}"
        title = "Flagged cases" + (" (continued)" if pages else f" ({count}, contact sooner first)")
        page.heading(title, gap_before=0.0)
        if not pages:
            page.paragraph("Next contact due: the day the chance of a follow-up stage would reach the rule's "
                           "threshold if nothing new is observed.", size=style.BODY_SIZE - 1, colour=style.MUTED)
            if left_out:
                page.caution_box(_left_out_note(left_out))
        if not rows:
            page.paragraph("No case is flagged on this date.")
            return [page]
        rows = page.table(columns, rows)
        pages.append(page)
        if not rows:
            return pages


def _timeline_pages(data) -> list:
    chosen = data.flagged_rows[:MAX_TIMELINES]
    if chosen.size == 0:
        return []
    left_out = data.flagged_rows.size - chosen.size
    histories = case_history(data.scores, chosen)
    s, view = data.scores, data.dates
    colours = style.stage_colours(len(data.stages))
    pages = []
    for start in range(0, chosen.size, TIMELINES_PER_PAGE):
        page = Page("flagged case timelines")
        page.heading("Flagged cases: stage probabilities over time" + (" (continued)" if pages else ""),
                     gap_before=0.0)
        note = ("Bands: smoothed stage probabilities at each contact (ticks) and the projection from the last "
                "contact; the veiled part is after the as-of date.")
        if left_out and not pages:
            note += f" Showing the first {chosen.size} flagged cases by priority; {left_out} more left out."
        page.paragraph(note, size=style.BODY_SIZE - 1, colour=style.MUTED)
        x = MARGIN
        for k, stage in enumerate(data.stages):
            page.text(x, page.cursor, f"■ {stage}", size=style.SMALL_SIZE + 0.5, colour=colours[k])
            x += 0.25 + len(stage) * 0.065
        page.cursor += 0.35
        for j, r in enumerate(chosen[start:start + TIMELINES_PER_PAGE]):
            r = int(r)
            column = j % 2
            if column == 0 and j:
                page.cursor += 2.62
            width = (page.content_width - 0.35) / 2
            left = MARGIN + column * (width + 0.35)
            top = page.cursor
            page.text(left, top, f"{s.case_ids[r]}", size=style.BODY_SIZE, weight="bold")
            page.text(left + width, top, f"{s.coordinators[r]} · P(reach follow-up) {_pct(s.p_reach_follow_up[r])}",
                      size=style.SMALL_SIZE + 0.5, colour=style.MUTED, ha="right")
            ax = page.figure.add_axes([(left + 0.35) / page.width, (page.height - top - 2.05) / page.height,
                                       (width - 0.4) / page.width, 1.7 / page.height])
            charts.case_timeline(ax, histories[start + j], data.stages, lambda d, r=r: view.case_days_axis(r, d),
                                 float(view.case_days_axis(r, [s.as_of_day])[0]), view.is_relative)
        pages.append(page)
    return pages


def _unscheduled_contacts_table(page, m) -> None:
    """Unscheduled contacts per year in each stage (only for a model with the timing block)."""
    if not m.unscheduled_per_year:
        return
    page.heading("Unscheduled contacts per year in each stage", size=style.BODY_SIZE + 1)
    page.paragraph("The model treats the timing of unscheduled contacts as evidence: people in some stages call "
                   "or are called about more often. " + ("Fitted to this caseload." if m.fitted else NOT_FITTED + "."),
                   size=style.BODY_SIZE - 1, colour=style.MUTED)
    has_interval = any(r.lower is not None and r.upper is not None for r in m.unscheduled_per_year)
    rows = []
    for r in m.unscheduled_per_year:
        cells = [r.stage, f"{r.per_year:,.1f}"]
        if has_interval:
            cells.append(f"{r.lower:,.1f} to {r.upper:,.1f}" if r.lower is not None and r.upper is not None else "-")
        rows.append(cells)
    columns = [Column("stage", 2.5), Column("per year", 1.3, "right")]
    if has_interval:
        columns.append(Column("interval", 1.6, "right"))
    page.table(columns, rows, size=style.BODY_SIZE - 0.5)


def _model_page(data) -> Page:
    m = data.model
    page = Page("model")
    page.heading("Model", gap_before=0.0)
    created = "" if data.dates.deidentified else f", created {m.created_utc[:10]}"
    page.paragraph(f"{m.name} - model version {m.version_id}{created}." + (f" Note: {m.note}" if m.note else ""))
    page.heading("Fit statistics", size=style.BODY_SIZE + 1)
    if m.statistics:
        page.table([Column("statistic", 2.5), Column("value", 1.6, "right")], [list(x) for x in m.statistics],
                   size=style.BODY_SIZE - 0.5)
    else:
        page.paragraph(NOT_FITTED.capitalize() + (": the current model's rates are as written in its model file."
                       if not m.fitted else ": the stored fit summary has no statistics."))
    page.heading("Mean time in each stage", size=style.BODY_SIZE + 1)
    page.paragraph(f"Days before moving on, {m.time_in_stage_source}.", size=style.BODY_SIZE - 1, colour=style.MUTED)
    has_interval = any(row.lower is not None and row.upper is not None for row in m.time_in_stage)
    rows = []
    for row in m.time_in_stage:
        cells = [row.stage, "absorbing" if row.mean is None else f"{row.mean:,.0f}"]
        if has_interval:
            cells.append(f"{row.lower:,.0f} to {row.upper:,.0f}" if row.lower is not None and row.upper is not None
                         else "-")
        rows.append(cells)
    columns = [Column("stage", 2.5), Column("mean days", 1.3, "right")]
    if has_interval:
        columns.append(Column("interval (days)", 1.6, "right"))
    page.table(columns, rows, size=style.BODY_SIZE - 0.5)
    _unscheduled_contacts_table(page, m)
    page.paragraph(f"Follow-up stages: {', '.join(m.follow_up_stages) or 'none'}. Covariates: "
                   f"{', '.join(m.covariates) or 'none'}.", size=style.BODY_SIZE - 0.5)
    items = [f"{rule.name} (threshold {rule.threshold:g})" for rule in data.assessment.rules if rule.enabled]
    if items:
        page.paragraph("Follow-up rules in use: " + "; ".join(items) + ".", size=style.BODY_SIZE - 0.5)
    page.heading("Audit trail", size=style.BODY_SIZE + 1)
    page.paragraph("Audit chain head when this report was made (hash of the newest audit entry; the report "
                   "itself is then recorded as the next entry):", size=style.BODY_SIZE - 0.5)
    page.text(MARGIN + 0.2, page.cursor, data.audit_head or "(empty audit trail)", size=style.BODY_SIZE - 0.5,
              family="monospace")
    page.cursor += 0.3
    options = ", ".join(f"{k} {v}" for k, v in data.options.items() if v not in (None, False)
                        and not (data.dates.deidentified and k == "since"))
    page.paragraph(f"Made by caseview {__version__} with options: {options}.", size=style.BODY_SIZE - 1,
                   colour=style.MUTED)
    return page


def write_pdf(data, path) -> int:
    """Lay out and save the report; returns the number of pages."""
    import matplotlib
    from matplotlib.backends.backend_pdf import PdfPages

    with matplotlib.rc_context({"pdf.fonttype": 42, "font.family": "DejaVu Sans", "axes.linewidth": 0.6}):
        from .outlook_page import outlook_page

        pages = ([_cover(data), _occupancy_page(data), outlook_page(data)] + _flag_pages(data)
                 + _timeline_pages(data) + [_model_page(data)])
        as_of = data.dates.report_date_text(data.as_of)
        header_right = (f"as of {as_of}" if not data.dates.deidentified else as_of) + f" · {_scope(data)}"
        metadata = {"Title": "caseview caseload report", "Subject": "Advisory caseload stage summary",
                    "Creator": f"caseview {__version__}", "Author": "caseview"}
        if data.dates.deidentified:
            metadata["CreationDate"] = None
        buffer = io.BytesIO()  # built in memory: a full disk fails in one plain write below, not inside zlib
        with PdfPages(buffer, metadata=metadata) as pdf:
            for number, page in enumerate(pages, start=1):
                page.frame(f"caseview caseload report · {page.title}", header_right, ADVISORY_NOTICE, number,
                           len(pages))
                pdf.savefig(page.figure)
    with open(path, "wb") as handle:
        handle.write(buffer.getbuffer())
    return len(pages)
