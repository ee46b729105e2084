"""Per-case rows shared by the spreadsheet and CSV exports, and text escaping for both.

Values keep their types (float probabilities, int days, ``datetime.date`` dates, text); each
writer formats them. Date columns follow the report's :class:`DateView` (relative mode renames
them ``<name>_day_relative`` and fills them with days since the case's first contact).
"""

from __future__ import annotations

import numpy as np

from caseview.followup.wording import points

from .deidentify import rewrite_dates

_SHORT = {
    "in_follow_up_now": "in a follow-up stage now",
    "likely_to_reach_follow_up": "likely to reach a follow-up stage",
    "long_gap_uncertain": "not seen for {value:.0f} days, stage uncertain",
    "sharp_rise": "sharp rise ({points})",
}

#: What a de-identified report shows instead of a review note (free text may name people or dates).
NOTE_LEFT_OUT = "(note left out of a de-identified report)"

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")   # kept for importers; the rule is caseview.cell_text


def escape_text(value):
    """Formula-like text neutralised (the one rule: :func:`caseview.cell_text.neutralise`)."""
    from caseview.cell_text import neutralise

    return neutralise(value)


def stage_column(stage: str) -> str:
    """``"Moved to residential care"`` -> ``"moved_to_residential_care"`` (:func:`caseview.model_names.column_key`,
    which model loading uses to refuse two stages that would share a column)."""
    from caseview.model_names import column_key

    return column_key(stage)


def _column(values, r, default=""):
    try:
        value = values[r]
    except (TypeError, IndexError):
        return default
    return default if value is None else value


def reason_text(data, r: int) -> str:
    """The assessment's full reason line for case row ``r``, its dates shown in the report's date mode."""
    return rewrite_dates(str(_column(data.assessment.reason_text, r)), data.dates, r)


def review_note(data, r: int) -> str:
    """The latest review note of case row ``r`` ('' when none; left out when the report is de-identified)."""
    note = str(_column(data.assessment.review_note, r) or "")
    if note and data.dates.deidentified:
        return NOTE_LEFT_OUT
    return note


def contact_day(contact) -> int:
    """Day number (since 1970-01-01) of a ContactInfluence."""
    return int(contact.day)


def short_reasons(data, r: int) -> str:
    """A compact reason per rule that fired, plus the most influential recent contact (PDF tables).

    The probabilities themselves are in the table's own columns and the thresholds on the model
    page, so only the rule and the contact that raised the probability most are named here.
    """
    reasons = list(_column(data.assessment.reasons, r, []) or [])
    if not reasons:
        return reason_text(data, r) or str(_column(data.assessment.flags, r))
    lines = []
    for reason in reasons:
        template = _SHORT.get(reason.rule)
        try:
            lines.append(template.format(value=float(reason.value), threshold=float(reason.threshold),
                                         points=points(float(reason.value))))
        except (AttributeError, TypeError, ValueError):
            lines.append(rewrite_dates(str(reason.message), data.dates, r))
    contacts = [c for c in reasons[0].contacts if c.change > 0.005]
    if contacts:
        top = contacts[0]
        evidence = f": {top.evidence.replace('=', ' ')}" if top.evidence else ""
        lines.append(f"the contact on {data.dates.case_text(r, contact_day(top))} raised it by "
                     f"{points(top.change)}{evidence}")
    return "; ".join(lines)


def case_columns(data) -> list:
    """Column names of :func:`case_records`, in order."""
    view = data.dates
    names = [stage_column(s) for s in data.stages]
    return (["case_id", "coordinator", view.column_name("as_of"), view.column_name("last_contact"),
             "days_since_contact", "n_contacts"]
            + [f"p_{n}" for n in names] + ["most_likely_stage"]
            + [f"p_{n}_at_horizon" for n in names]
            + ["p_follow_up_now", "p_reach_follow_up", "horizon_days", "flags", "reasons",
               view.column_name("next_contact_due"), "review_status", "reviewed_by",
               view.column_name("reviewed_at"), "review_note"])


def case_records(data, rows=None) -> list:
    """One list of values per case (``data.listed_rows`` by default), aligned with :func:`case_columns`."""
    a, s, view = data.assessment, data.scores, data.dates
    rows = data.listed_rows if rows is None else rows
    records = []
    for r in rows:
        r = int(r)
        due = int(_column(a.next_contact_due_day, r, -1))
        records.append(
            [str(s.case_ids[r]), str(s.coordinators[r] or ""),
             view.case_value(r, s.as_of_day), view.case_value(r, int(s.last_contact_day[r])),
             int(s.days_since_contact[r]), int(s.n_contacts[r])]
            + [float(v) for v in s.p_now[r]] + [str(data.stages[int(s.most_likely_stage[r])])]
            + [float(v) for v in s.p_at_horizon[r]]
            + [float(s.p_follow_up_now[r]), float(s.p_reach_follow_up[r]), float(s.horizon_days),
               str(_column(a.flags, r)), reason_text(data, r),
               view.case_value(r, due if due >= 0 else None),
               str(_column(a.review_status, r)), str(_column(a.reviewed_by, r)),
               view.case_timestamp_value(r, _column(a.reviewed_at, r, None)), review_note(data, r)])
    return records


def not_scored_records(data) -> list:
    """Rows for the cases that cannot be scored, aligned with :func:`case_columns`: no numbers,
    ``flags`` = ``cannot_be_scored: <reason>`` and the reason under ``reasons`` too."""
    width = len(case_columns(data))
    flags_at = case_columns(data).index("flags")
    records = []
    for case_id, coordinator, reason in data.not_scored:
        row = [None] * width
        row[0], row[1], row[flags_at], row[flags_at + 1] = case_id, coordinator, f"cannot_be_scored: {reason}", reason
        records.append(row)
    return records


def review_records(data) -> tuple:
    """Columns and rows of the reviews table: flagged cases (outstanding or done) and reviewed cases."""
    a, s, view = data.assessment, data.scores, data.dates
    status = np.asarray(a.review_status, dtype=object)
    flagged = np.asarray(a.is_flagged, dtype=bool)
    chosen = [int(r) for r in data.rows if flagged[r] or str(status[r] or "")]
    columns = ["case_id", "coordinator", "flagged_now", "flags", "review_status", "review_done",
               "reviewed_by", view.column_name("reviewed_at"), "review_note"]
    rows = []
    for r in chosen:
        state = str(status[r] or "")
        rows.append([str(s.case_ids[r]), str(s.coordinators[r] or ""), "yes" if flagged[r] else "no",
                     str(_column(a.flags, r)), state or "not reviewed",
                     "yes" if state in ("acknowledged", "actioned", "dismissed") else "no",
                     str(_column(a.reviewed_by, r)), view.case_timestamp_value(r, _column(a.reviewed_at, r, None)),
                     review_note(data, r)])
    return columns, rows
