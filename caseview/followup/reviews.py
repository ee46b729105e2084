"""Supervisor reviews of flags: a small status machine, audited.

Statuses and the allowed changes (anything else is refused with an InputError that says what is
allowed from the current status)::

    new           -> acknowledged                 (someone has seen the flag)
    acknowledged  -> actioned | dismissed         (contact made / concern judged unfounded)
    actioned      -> acknowledged                 (a later concern on the same case is taken up)
    dismissed     -> acknowledged                 (the dismissal is reconsidered by a person)
    dismissed     -> new                          (automatic re-open only, actor "caseview")

A case without any review has status ``new`` (when flagged). A dismissal needs a non-empty note
giving the reason. Notes and actor names are one line of plain text (no tabs, line breaks or other
control characters: they would let a listing print a forged line), and a note goes through the
identifier screen (:mod:`caseview.privacy`) like every imported value: a note that looks like it
holds a direct identifier (a name with a title, a phone number, an address, a full date, ...) is
refused, not masked, because a masked note would no longer say what its author meant; the
message says what it looks like without repeating it. Each change is stored in ONE transaction
with its audit entry (action ``review.<status>``, target the case ID; details: previous status,
note, flags, P(follow-up now), as-of date). The actor is the operating-system user unless ``--by`` names someone: attribution,
not authentication.

Re-opening: a dismissed case whose P(follow-up stage now) at a later assessment (as-of date on or
after the dismissal's) is at least :data:`REOPEN_RISE` (0.15, absolute) above the value recorded at
dismissal goes back to ``new`` (audited as ``review.reopened`` by ``caseview``). 0.15 is somewhat
below the sharp-rise rule's 0.20: a person already looked at this case and set it aside, so a
smaller but clear change in the evidence is enough to ask them to look again. Drift alone
rarely gets there: the largest 30-day rise of a demo case with no new contact was 0.08 (see
:mod:`caseview.followup.rules`, ``sharp_rise``).
"""

from __future__ import annotations

import datetime as dt
import math

from caseview.errors import InputError

STATUSES = ("new", "acknowledged", "actioned", "dismissed")
#: Statuses a person may set (``new`` is set only by the automatic re-open).
SETTABLE_STATUSES = ("acknowledged", "actioned", "dismissed")
ALLOWED_CHANGES = {
    "new": ("acknowledged",),
    "acknowledged": ("actioned", "dismissed"),
    "actioned": ("acknowledged",),
    "dismissed": ("acknowledged",),
}
REOPEN_RISE = 0.15
REOPEN_ACTOR = "caseview"


def check_change(case_id: str, current: str, status: str, note: str) -> None:
    """Raise InputError unless ``current -> status`` is allowed (with the note rules)."""
    if status not in SETTABLE_STATUSES:
        raise InputError(f"review of {case_id}: status must be one of {', '.join(SETTABLE_STATUSES)}, "
                         f"got {status!r}")
    if status == current:
        raise InputError(f"review of {case_id}: the case is already {current}")
    allowed = ALLOWED_CHANGES[current]
    if status not in allowed:
        raise InputError(f"review of {case_id}: cannot go from {current} to {status}; "
                         f"from {current} the allowed status is {' or '.join(allowed)}")
    if status == "dismissed" and not (note or "").strip():
        raise InputError(f"review of {case_id}: a dismissal needs a reason; write it in the note")


def check_note(case_id: str, note: str) -> str:
    """The note, stripped; InputError when it has control characters or looks like it holds an identifier."""
    from caseview import privacy
    from caseview.textfiles import check_one_line

    note = check_one_line(note, f"review of {case_id}: the note").strip()
    finding = privacy.screen_value(note, "other") if note else None
    if finding is not None:
        raise InputError(f"review of {case_id}: the note {finding.description} (identifier rule {finding.rule}); "
                         "notes are kept in the workspace and its audit trail for good, so they must not hold direct "
                         "identifiers - describe the reason without them")
    return note


def _finite_or_none(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _case_numbers(ws, case_id: str, assessment, as_of):
    """(flags, p_follow_up_now, as_of text) for a case, from an assessment or by scoring."""
    if assessment is None:
        from caseview.scoring import score_caseload

        from caseview.storage import followup_store as store

        from .flags import evaluate_rules
        from .rules import workspace_rules

        when = as_of or dt.datetime.now(dt.timezone.utc).date()
        scores = score_caseload(ws, when)
        row = scores.row_of(case_id)
        if row < 0:
            return "", None, when.isoformat()
        previous_run = store.previous_run(ws.connection, when.isoformat())
        previous = None
        if previous_run is not None:
            previous = [previous_run[2].get(str(code), float("nan")) for code in scores.case_ids]
        rules = workspace_rules(ws)
        fired = evaluate_rules(scores, rules, previous).fired[row]
        flags = ";".join(name for name, hit in zip(rules.names, fired) if hit)
        return flags, float(scores.p_follow_up_now[row]), when.isoformat()
    row = assessment.scores.row_of(case_id)
    if row < 0:
        return "", None, assessment.scores.as_of.isoformat()
    return (str(assessment.flags[row]), float(assessment.scores.p_follow_up_now[row]),
            assessment.scores.as_of.isoformat())


def record_review(ws, case_id: str, status: str, note: str, actor: str, assessment=None,
                  as_of: dt.date | None = None):
    """Change a case's review status, with its audit entry, in one transaction.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    case_id : str
        The pseudonymous case code as typed (found with :meth:`Workspace.find_case`).
    status : {"acknowledged", "actioned", "dismissed"}
    note : str
        Free text; required (non-empty) for a dismissal.
    actor : str
        Who made the change (attribution, not authentication).
    assessment : CaseloadAssessment, optional
        Where the case's flags and P(follow-up now) are read from; when None the caseload is
        scored as of ``as_of`` (default: today, UTC).

    Returns
    -------
    caseview.storage.followup_store.ReviewRow
        The stored review.

    Raises
    ------
    InputError
        Unknown case, a change that is not allowed, a dismissal without a reason.
    """
    from caseview.storage import followup_store as store

    from caseview.textfiles import check_one_line, printable

    case_id = ws.find_case(case_id)  # the typed ID read like an imported one; InputError if no such case
    if not actor or not str(actor).strip():
        raise InputError(f"review of {case_id}: the name recorded with the review is empty; give a name")
    check_one_line(actor, f"review of {case_id}: the name recorded with the review")
    note = check_note(case_id, note or "")
    # Validate against the stored status before the (possibly slow) scoring, then again inside
    # the write transaction so that a concurrent change cannot slip in between.
    previous = store.latest_reviews(ws.connection, case_id).get(case_id)
    check_change(case_id, previous.status if previous else "new", status, note)
    flags, p_follow_up, as_of_text = _case_numbers(ws, case_id, assessment, as_of)
    with ws.transaction():
        latest = store.latest_reviews(ws.connection, case_id).get(case_id)
        if (latest.id if latest else None) != (previous.id if previous else None):
            raise InputError(f"review of {case_id}: changed by {printable(latest.actor)} a moment ago (now "
                             f"{latest.status}); nothing was stored - look at the case again")
        current = latest.status if latest else "new"
        check_change(case_id, current, status, note)
        details = {"from": current, "to": status, "note": note, "flags": flags,
                   "p_follow_up_now": _finite_or_none(p_follow_up), "as_of": as_of_text}
        _audited_review(ws, actor, f"review.{status}", case_id, details, status, note, flags,
                        _finite_or_none(p_follow_up), as_of_text)
    stored = store.latest_reviews(ws.connection, case_id)[case_id]
    if assessment is not None:
        row = assessment.scores.row_of(case_id)
        if row >= 0:
            assessment.note_review(row, stored)
    return stored


def _audited_review(ws, actor, action, case_id, details, status, note, flags, p_follow_up, as_of_text):
    """Store one review row and then its audit entry (which records the row's digest); inside a transaction."""
    from caseview.storage import followup_store as store
    from caseview.storage.audit import utc_now
    from caseview.storage.row_digests import RowChanges

    entry_id, at = ws.next_audit_entry_id(), utc_now()  # the row names its entry; we hold the write lock
    review_id = store.insert_review(ws.connection, case_id, status, note, actor, at, flags, p_follow_up, as_of_text,
                                    entry_id)
    entry = ws.audit_append(actor, action, case_id, details, changes=RowChanges(rows={"reviews": [review_id]}),
                            at_utc=at)
    assert entry.id == entry_id
    return entry


def reopen_candidates(latest: dict, case_ids, p_follow_up_now, as_of: dt.date, rise: float = REOPEN_RISE) -> list:
    """Dismissed cases whose P(follow-up now) rose by at least ``rise`` since dismissal.

    Parameters
    ----------
    latest : dict
        Case code -> latest ReviewRow.
    case_ids : ndarray of object, shape (n,)
    p_follow_up_now : ndarray, shape (n,)
    as_of : date
        The assessment date; only dismissals recorded as of this date or earlier count.

    Returns
    -------
    list of (case_id, value_at_dismissal, value_now)
    """
    out = []
    iso = as_of.isoformat()
    for code, value in zip(case_ids, p_follow_up_now):
        review = latest.get(str(code))
        if review is None or review.status != "dismissed" or review.p_follow_up is None:
            continue
        if review.as_of is not None and review.as_of > iso:
            continue
        if float(value) - review.p_follow_up >= rise - 1e-12:
            out.append((str(code), float(review.p_follow_up), float(value)))
    return out


def reopen_dismissed(ws, candidates: list, as_of: dt.date, flags_by_case: dict) -> list:
    """Set the candidates back to ``new``, one transaction with their audit entries."""
    from caseview.storage import followup_store as store

    if not candidates:
        return []
    with ws.transaction():
        latest = store.latest_reviews(ws.connection)
        done = []
        for code, before, now in candidates:
            if latest.get(code) is None or latest[code].status != "dismissed":
                continue  # changed by someone else meanwhile
            note = (f"re-opened: P(follow-up stage now) rose from {before:.2f} at dismissal to {now:.2f} "
                    f"as of {as_of.isoformat()} (rise >= {REOPEN_RISE:.2f})")
            details = {"from": "dismissed", "to": "new", "note": note, "flags": flags_by_case.get(code, ""),
                       "p_follow_up_now": now, "p_follow_up_at_dismissal": before, "as_of": as_of.isoformat()}
            _audited_review(ws, REOPEN_ACTOR, "review.reopened", code, details, "new", note,
                            flags_by_case.get(code, ""), now, as_of.isoformat())
            done.append(code)
    return done


def pending_reopens(ws, assessment) -> list:
    """Dismissed flags the assessment would re-open (read only; nothing is written).

    Returns
    -------
    list of (case_id, value_at_dismissal, value_now), as :func:`reopen_candidates`.
    """
    from caseview.storage import followup_store as store

    scores = assessment.scores
    return reopen_candidates(store.latest_reviews(ws.connection), scores.case_ids, scores.p_follow_up_now,
                             scores.as_of)


def reopen_risen(ws, assessment) -> list:
    """The explicit, audited step that re-opens dismissed flags whose risk rose (window and CLI).

    Loading a caseload never writes; this is what a person asks for (the window's risk queue
    offers it when :func:`pending_reopens` finds any).

    Returns
    -------
    list[str]
        Case IDs set back to ``new`` (one ``review.reopened`` audit entry each).
    """
    candidates = pending_reopens(ws, assessment)
    flags_by_case = dict(zip(map(str, assessment.scores.case_ids), assessment.flags))
    return reopen_dismissed(ws, candidates, assessment.scores.as_of, flags_by_case)
