"""Case work, the jobs both faces call: record, correct and void a contact; list a case's contacts;
add, close and reopen a case; rescore one case.

Every value a person types goes through the import's own validation and identifier screen
(:class:`caseview.timeline_io.validate.ChunkValidator` on a one-row table), so a recorded contact
meets exactly the rules an imported row meets. Every change is one storage function
(:mod:`caseview.storage.casework_store`) that writes its rows and its audit entry in one
transaction: bad input raises :class:`caseview.errors.InputError` and nothing is stored.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import asdict, dataclass, field

import numpy as np

from ..errors import InputError
from ..storage import casework_store as store
from ..storage.casework_store import CLOSE_REASONS, CaseClosure, ContactVersion

__all__ = ["CLOSE_REASONS", "ContactVersion", "CaseClosure", "RecordResult", "ContactChange", "CaseEstimate",
           "record_contact", "add_case", "correct_contact", "void_contact", "list_contacts", "close_case",
           "reopen_case", "closing_suggestion", "case_estimate", "rescore_case", "contact_form_defaults"]


@dataclass(frozen=True)
class CaseEstimate:
    """One case's stage probabilities on a day (advisory), from its current contacts up to that day.

    ``p_now`` maps stage -> probability (empty when the case has no contact on or before the day).
    """

    case_id: str
    as_of: str
    p_now: dict
    most_likely: str
    p_follow_up_now: float

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class RecordResult:
    """A stored contact: what was stored, what was carried over, the case's estimate afterwards.

    ``carried_over`` names the covariates taken from the case's latest earlier contact;
    ``closing_suggestion`` is a sentence when the record shows a stage with no way out ('' otherwise).
    """

    case_id: str
    date: str
    case_created: bool
    carried_over: tuple
    details: dict
    estimate: CaseEstimate
    closing_suggestion: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class ContactChange:
    """A correction or a void: the audit details (old and new values, reason) and the estimate after."""

    case_id: str
    action: str
    details: dict
    estimate: CaseEstimate
    closing_suggestion: str = ""
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return asdict(self)


# ------------------------------------------------------------------ validation (the import's rules)
def _day(date) -> int:
    from ..dates import parse_date, to_day

    if isinstance(date, dt.date):
        return to_day(date)
    return to_day(parse_date(str(date), "--date"))


def _number_text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    return str(value).strip()


def _validated(ws, source: str, case_id: str, date, coordinator: str, values: dict, covariates: dict,
               stage_known: str):
    """One contact checked by the import's validator; returns a one-row ContactBatch."""
    import pandas as pd

    from ..storage import ContactBatch
    from ..timeline_io.validate import ChunkValidator, Problems, Rules

    model, _ = ws.current_model()
    channels = {c.name: tuple(c.categories) for c in model.channels}
    for name in values:
        if name not in channels:
            raise InputError(f"{source}: unknown channel {name!r}; expected one of {', '.join(channels)}")
    for name in covariates:
        if name not in model.covariates:
            raise InputError(f"{source}: unknown covariate {name!r}; expected one of "
                             f"{', '.join(model.covariates) or 'none (the model has no covariates)'}")
    columns = ["case_id", "date", "coordinator", *channels, *model.covariates, "stage_known"]
    cells = [str(case_id), date if isinstance(date, str) else str(date), coordinator or "",
             *[str(values.get(name, "") or "") for name in channels],
             *[_number_text(covariates.get(name)) for name in model.covariates], stage_known or ""]
    rules = Rules(channels=channels, covariates=tuple(model.covariates), stages=tuple(model.stages),
                  present=tuple(columns), covariate_ranges=model.range_of)
    problems = Problems(source)
    validator = ChunkValidator(rules, problems, lambda line: "the contact")
    encoded = validator.validate(1, pd.DataFrame([cells], columns=list(range(len(columns))), dtype=object))
    if problems.count or encoded is None:
        first = sorted(problems.lines)[0][2] if problems.lines else f"{source}: the contact is empty"
        more = f" (and {problems.count - 1} more problem{'s' if problems.count > 2 else ''})" \
            if problems.count > 1 else ""
        raise InputError(f"{first}{more}; nothing was stored")
    return ContactBatch(case_codes=encoded.case_codes, days=encoded.days, coordinators=encoded.coordinators,
                        channel_names=tuple(channels), channel_categories=tuple(channels.values()),
                        channel_values=encoded.channel_values, covariate_names=tuple(model.covariates),
                        covariates=encoded.covariates, stage_known=encoded.stage_known)


CONTACT_KINDS = ("scheduled", "unscheduled")


def _with_kind(batch, contact_kind, source: str):
    """The batch with its contact kind ('scheduled' or 'unscheduled', letter case ignored)."""
    import dataclasses

    kind = str(contact_kind or "").strip().lower()
    if kind not in CONTACT_KINDS:
        raise InputError(f"{source}: contact kind {contact_kind!r}: expected scheduled or unscheduled "
                         "(nothing was stored)")
    return dataclasses.replace(batch, unscheduled=np.array([kind == "unscheduled"]))


def _existing_case(ws, case_id: str, source: str) -> str:
    """The stored case that a typed ID names (the workspace's one lookup, letter case ignored)."""
    return ws.find_case(case_id)


def _case_code(ws, case_id: str, source: str) -> str:
    """The case ID as the import would store it (checked and screened like an imported one)."""
    try:
        return ws.find_case(case_id)  # an existing case, however it was typed
    except InputError:
        pass  # a new case: checked below like an imported ID
    model, _ = ws.current_model()
    covariates = {name: 0 for name in model.covariates}
    batch = _validated(ws, source, case_id, "2000-01-01", "", {}, covariates, "")
    return str(batch.case_codes[0])


# ------------------------------------------------------------------ reading
def list_contacts(ws, case_id: str, all_versions: bool = False) -> list[ContactVersion]:
    """The case's current contacts, or every version (current, superseded, voided), by date."""
    code = _existing_case(ws, case_id, "contacts")
    if store.case_key(ws.connection, code) is None:
        raise InputError(f"case {code!r}: no such case in {ws.path.name}")
    return store.contact_history(ws.connection, code, all_versions)


def contact_form_defaults(ws, case_id: str, date=None) -> dict:
    """What a new contact of ``case_id`` starts from: covariates of its latest contact before ``date``.

    Returns {"exists": bool, "coordinator": str, "covariates": {name: number}, "previous_date": str,
    "closed": CaseClosure or None}.
    """
    con = ws.connection
    key = store.case_key(con, case_id)
    if key is None:
        return {"exists": False, "coordinator": "", "covariates": {}, "previous_date": "", "closed": None}
    day = _day(date) if date is not None else 10 ** 6
    previous = store.latest_contact_before(con, case_id, day)
    coordinator = con.execute("SELECT coordinator FROM cases WHERE id = ?", (key,)).fetchone()[0]
    covariates = {k: v for k, v in (previous.covariates if previous else {}).items() if v is not None}
    return {"exists": True, "coordinator": coordinator, "covariates": covariates,
            "previous_date": previous.date if previous else "", "closed": store.case_closure(con, case_id)}


def case_estimate(ws, case_id: str, as_of, horizon_days: float = 90.0) -> CaseEstimate:
    """The case's stage probabilities on ``as_of`` from its current contacts (reads only that case)."""
    from ..dates import from_day
    from ..scoring import score_loaded

    model, version = ws.current_model()
    day = _day(as_of)
    one = ws.load_case(model, case_id, as_of_day=day)
    if one.n_cases == 0:
        return CaseEstimate(case_id, from_day(day).isoformat(), {}, "", 0.0)
    from .single_case import few_blas_threads

    with few_blas_threads():   # one case: small matrices
        scores = score_loaded(one, model, day, horizon_days, model_version=version.id)
    p = scores.p_now[0]
    return CaseEstimate(case_id, from_day(day).isoformat(), {s: float(p[i]) for i, s in enumerate(model.stages)},
                        model.stages[int(np.argmax(p))], float(scores.p_follow_up_now[0]))


def _refuse_contradiction(ws, case_id: str, source: str, day: int) -> None:
    """InputError when a stored contact of the case comes after its recorded absorbing exact entry.

    robust's check (:func:`caseview.case_checks.contradictory_contacts`, the one import runs) on this
    case's stored contacts, with import's wording; called inside the write's transaction (it sees the new row) ahead of the
    likelihood check, so the change rolls back. ``day`` is the contact just written.
    """
    from ..case_checks import contradiction_message, contradictory_contacts

    model, _ = ws.current_model()
    if not model.exact_entry_stages:
        return
    history = store.contact_history(ws.connection, case_id)   # this case only (the caseload's check reads
    found = contradictory_contacts(                          # every case with a recorded move: 1.4 s at 100,000)
        model, np.full(len(history), case_id, dtype=object), np.array([v.day for v in history], dtype=np.int64),
        np.array([v.stage_known or "" for v in history], dtype=object))
    if not found:
        return
    c = next((f for f in found if day in (f.day, f.entry_day)), found[0])

    def where(d):
        return "this contact" if d == day else f"the stored contact of {np.datetime64(d, 'D')}"

    raise InputError(f"{source}: " + contradiction_message(
        c, where(c.day), where(c.entry_day),
        "correct the date or the stage, or correct or void the contradicting contact (nothing was stored)"))


def _refuse_impossible(ws, case_id: str, source: str) -> None:
    """InputError when the case's current contacts are impossible together under the model.

    For example a contact after one that records entry into a stage with no way out: the
    likelihood of the case's record is zero. Called inside the write's transaction, so the change
    rolls back.
    """
    from ..scoring import score_loaded

    model, _ = ws.current_model()
    one = ws.load_case(model, case_id)
    if one.n_cases == 0:
        return
    last = int(one.contact_days[-1])
    scores = score_loaded(one, model, last, 0.0)
    total = float(np.sum(scores.p_now[0]))
    if np.isfinite(scores.log_likelihood[0]) and abs(total - 1.0) < 1e-6:
        return
    absorbing = {model.stages[i] for i in model.absorbing_stages}
    history = store.contact_history(ws.connection, case_id)
    entered = [v for v in history[:-1] if v.stage_known and set(v.stage_known.split("|")) <= absorbing]
    why = (f"the contact on {entered[0].date} records {entered[0].stage_known}, a stage with no way out, "
           "so no later contact can differ" if entered else
           "under the current model no sequence of stages fits all of the case's contacts")
    raise InputError(f"{source}: case {case_id!r}: the record would contradict itself ({why}); "
                     "correct or void the contradicting contact instead (nothing was stored)")


def closing_suggestion(ws, case_id: str) -> str:
    """A sentence offering to close the case when its latest contact records a stage with no way out."""
    model, _ = ws.current_model()
    history = store.contact_history(ws.connection, case_id)
    if not history or not history[-1].stage_known or store.case_closure(ws.connection, case_id) is not None:
        return ""
    absorbing = {model.stages[i] for i in model.absorbing_stages}
    recorded = history[-1].stage_known.split("|")
    if not recorded or not set(recorded) <= absorbing:
        return ""
    return (f"The contact on {history[-1].date} records {' or '.join(recorded)}, a stage with no way out; "
            f"consider closing the case from that date.")


# ------------------------------------------------------------------ changes
def record_contact(ws, case_id: str, date, actor: str, values: dict | None = None, covariates: dict | None = None,
                   stage_known: str | None = None, coordinator: str | None = None, source: str = "record",
                   new_case: bool | None = None, contact_kind: str = "scheduled") -> RecordResult:
    """Record a contact after a visit; a case ID never seen before creates the case.

    Parameters
    ----------
    ws : caseview.storage.Workspace
    case_id, date : the case and the contact's date (``datetime.date`` or YYYY-MM-DD)
    actor : name recorded in the audit trail (attribution, not authentication)
    values : {channel: category}; channels left out are not observed
    covariates : {name: number}; covariates left out carry over from the case's latest earlier contact
    stage_known : a stage, or several joined with '|', or None
    coordinator : required for a new case; for an existing case, None keeps the case's coordinator
    new_case : True = must be new (adding a person), False = must exist, None = either
    contact_kind : 'scheduled' (a planned visit, the default) or 'unscheduled' (a fall, a worried call)
    """
    code = _case_code(ws, case_id, source)
    date_text = date.isoformat() if isinstance(date, dt.date) else str(date)
    defaults = contact_form_defaults(ws, code, date_text if _looks_like_date(date_text) else None)
    exists = defaults["exists"]
    if new_case is True and exists:
        raise InputError(f"{source}: case {code!r} already exists; record a contact for it instead "
                         "(nothing was stored)")
    if new_case is False and not exists:
        raise InputError(f"{source}: case {code!r} does not exist (nothing was stored)")
    if not exists and not (coordinator or "").strip():
        raise InputError(f"{source}: case {code!r} is new; give its coordinator (for example C2) to create it "
                         "(nothing was stored)")
    given = dict(covariates or {})
    carried = tuple(name for name in ws.current_model()[0].covariates
                    if name not in given and name in defaults["covariates"])
    missing = [name for name in ws.current_model()[0].covariates if name not in given and name not in carried]
    if missing:
        why = "it has no earlier contact" if exists else "it is a new case"
        raise InputError(f"{source}: covariate {missing[0]!r} needs a value because {why} to carry it over from; "
                         f"give {missing[0]} a number (nothing was stored)")
    for name in carried:
        given[name] = defaults["covariates"][name]
    batch = _validated(ws, source, code, date_text, coordinator or "", dict(values or {}), given, stage_known or "")
    batch = _with_kind(batch, contact_kind, source)
    with ws.transaction():  # the storage write joins this transaction; an impossible record rolls it back
        details = store.record_contact(ws, batch, actor, create_case=not exists)
        _refuse_contradiction(ws, code, source, int(batch.days[0]))
        _refuse_impossible(ws, code, source)
    return RecordResult(code, details["date"], not exists, carried, details,
                        case_estimate(ws, code, details["date"]), closing_suggestion(ws, code))


def add_case(ws, case_id: str, coordinator: str, date, actor: str, values: dict | None = None,
             covariates: dict | None = None, stage_known: str | None = None, source: str = "add case",
             contact_kind: str = "scheduled") -> RecordResult:
    """Add a person: a new case with its first contact (a case exists through its contacts)."""
    return record_contact(ws, case_id, date, actor, values, covariates, stage_known, coordinator, source,
                          new_case=True, contact_kind=contact_kind)


def _looks_like_date(text: str) -> bool:
    try:
        _day(text)
        return True
    except InputError:
        return False


def _reason(reason: str, source: str) -> str:
    text = " ".join(str(reason or "").split())
    if not text:
        raise InputError(f"{source}: a reason is required; nothing was stored")
    if len(text) > 500:
        raise InputError(f"{source}: the reason is {len(text)} characters long; expected at most 500 "
                         "(nothing was stored)")
    if any(ord(ch) < 32 or 127 <= ord(ch) < 160 for ch in text):
        raise InputError(f"{source}: the reason holds control characters; expected plain text (nothing was stored)")
    from .. import privacy

    finding = privacy.screen_value(text, "other", "reason")  # the import's identifier screen
    if finding is not None:
        raise InputError(f"{source}: the reason {finding.description} (identifier rule {finding.rule}); caseview "
                         "never stores direct identifiers - describe the change without them (nothing was stored)")
    return text


def correct_contact(ws, case_id: str, date, reason: str, actor: str, new_date=None, values: dict | None = None,
                    covariates: dict | None = None, stage_known: str | None = None, coordinator: str | None = None,
                    source: str = "correct", contact_kind: str | None = None) -> ContactChange:
    """Correct the contact of ``case_id`` on ``date``; what is not given keeps its recorded value.

    The earlier version stays stored (superseded) and listed; ``stage_known=''`` clears a known stage;
    ``contact_kind`` None keeps the recorded kind.
    """
    reason = _reason(reason, source)
    code = _existing_case(ws, case_id, source)
    day = _day(date)
    current = {v.day: v for v in store.contact_history(ws.connection, code)}
    if day not in current:
        store._existing_contact(ws.connection, code, day)  # raises the one-line message
    old = current[day]
    merged_values = dict(old.values)
    merged_values.update(values or {})
    merged_covariates = {k: v for k, v in old.covariates.items() if v is not None}
    merged_covariates.update(covariates or {})
    stage = old.stage_known if stage_known is None else stage_known
    target = new_date if new_date is not None else old.date
    target = target.isoformat() if isinstance(target, dt.date) else str(target)
    batch = _validated(ws, source, code, target, coordinator or "", merged_values, merged_covariates, stage)
    batch = _with_kind(batch, old.contact_kind if contact_kind is None else contact_kind, source)
    with ws.transaction():
        details = store.correct_contact(ws, code, day, batch, actor, reason)
        _refuse_contradiction(ws, code, source, int(batch.days[0]))
        _refuse_impossible(ws, code, source)
    return ContactChange(code, "contact.correct", details, case_estimate(ws, code, details["new"]["date"]),
                         closing_suggestion(ws, code))


def void_contact(ws, case_id: str, date, reason: str, actor: str, source: str = "void") -> ContactChange:
    """Void the contact of ``case_id`` on ``date`` (wrong case, or it never happened); it stays stored."""
    reason = _reason(reason, source)
    code = _existing_case(ws, case_id, source)
    details = store.void_contact(ws, code, _day(date), actor, reason)
    return ContactChange(code, "contact.void", details, case_estimate(ws, code, details["date"]),
                         closing_suggestion(ws, code))


def close_case(ws, case_id: str, date, reason: str, actor: str) -> dict:
    """Close a case from ``date`` for a reason in :data:`CLOSE_REASONS`; returns the audit details."""
    code = _existing_case(ws, case_id, "close")
    return store.close_case(ws, code, _day(date), str(reason).strip().lower(), actor)


def reopen_case(ws, case_id: str, actor: str) -> dict:
    """Reopen a closed case; returns the audit details (the closing it ended)."""
    return store.reopen_case(ws, _existing_case(ws, case_id, "reopen"), actor)


def rescore_case(ws, loaded, case_id: str, include_closed: bool = False):
    """The window's caseload with one case rescored from its own contacts (see :mod:`.single_case`)."""
    from .single_case import rescore_one

    return rescore_one(ws, loaded, case_id, include_closed)
