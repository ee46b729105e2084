"""Day-to-day case work on disk: record, correct and void one contact; close and reopen a case.

Every change is ONE function here that writes its rows and its audit entry in one transaction
(``Workspace.transaction``), so a change is stored whole with its audit entry or not at all, and
anything that must accompany every change (for example a digest of the rows changed) has one place
per change kind to live.

Earlier versions are never overwritten (21 CFR 11.10(e): record changes must not obscure
previously recorded information). ``contacts`` holds only the current version of each contact, so
scoring, fitting and exports read current contacts with the fast read unchanged; the version a
correction replaces, or a void removes, moves to ``contact_versions`` (append-only, triggers refuse
UPDATE and DELETE) in the same transaction. See :data:`caseview.storage.schema.CASEWORK_SCHEMA`.

Which cases are open on a day is answered by :func:`open_case_mask`, the one place for that rule:
a case is closed from its closing day on (the closing day itself counts as closed).
"""

from __future__ import annotations

import sqlite3
from dataclasses import asdict, dataclass

import numpy as np

from ..dates import day_text
from ..errors import InputError
from . import audit as _audit
from . import case_packs
from .contact_writer import ContactBatch, encode_batch
from .contacts import field_layout
from .row_digests import RowChanges
from .schema import BLANK_CODE

CLOSE_REASONS = ("moved", "discharged", "died", "transferred", "other")
CURRENT, SUPERSEDED, VOIDED = "current", "superseded", "voided"


def _date(day: int) -> str:
    return day_text(day)


@dataclass(frozen=True)
class ContactVersion:
    """One version of one contact, as recorded.

    ``values`` maps channel -> category ('' = not observed); ``covariates`` maps name -> number
    (None when the workspace has no value). ``status`` is current | superseded | voided.
    ``recorded_at``/``recorded_by``/``recorded_reason`` say when, by whom and why this version was
    recorded ('' for a contact imported from a file: its import is in the audit trail);
    ``ended_at``/``ended_by``/``reason`` when, by whom and why it stopped being current ('' while
    current).
    """

    case_id: str
    day: int
    values: dict
    covariates: dict
    stage_known: str
    coordinator: str
    status: str
    recorded_at: str
    recorded_by: str
    recorded_reason: str
    ended_at: str = ""
    ended_by: str = ""
    reason: str = ""
    contact_kind: str = "scheduled"  # or "unscheduled" (README, "Timing of unscheduled contacts")

    @property
    def date(self) -> str:
        return _date(self.day)

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> "ContactVersion":
        return cls(**data)


@dataclass(frozen=True)
class CaseClosure:
    """A closed case: closed from ``closed_day`` (days since 1970-01-01) for ``reason``."""

    case_id: str
    closed_day: int
    reason: str
    closed_at: str
    closed_by: str

    def to_dict(self) -> dict:
        return asdict(self)


# ------------------------------------------------------------------ reading
def case_key(connection, case_code: str) -> int | None:
    """The stored id of case ``case_code`` or None."""
    row = connection.execute("SELECT id FROM cases WHERE case_code = ?", (case_code,)).fetchone()
    return None if row is None else int(row[0])


def _decode(layout, observations: bytes, covariates: bytes) -> tuple[dict, dict]:
    values = {}
    for position, (name, _, labels) in enumerate(layout.channels):
        code = observations[position] if position < len(observations) else BLANK_CODE
        values[name] = "" if code == BLANK_CODE or code >= len(labels) else labels[code]
    numbers = np.frombuffer(covariates, dtype="<f8") if covariates else np.zeros(0)
    covs = {name: (None if k >= numbers.size or np.isnan(numbers[k]) else float(numbers[k]))
            for k, name in enumerate(layout.covariates)}
    return values, covs


def _coordinator_codes(connection) -> dict:
    return dict(connection.execute("SELECT id, code FROM coordinators").fetchall())


def _current_row(connection, case_id: int, day: int):
    return connection.execute(
        "SELECT c.observations, c.covariates, c.stage_known, c.coordinator_id, p.recorded_at, p.recorded_by,"
        " p.reason, c.contact_kind FROM contacts c LEFT JOIN contact_provenance p ON p.case_id = c.case_id AND p.day = c.day"
        " WHERE c.case_id = ? AND c.day = ?", (case_id, day)).fetchone()


def contact_history(connection, case_code: str, all_versions: bool = False) -> list[ContactVersion]:
    """The case's contacts (current only, or with every superseded and voided version), by date.

    Within a date the current version comes first, then earlier versions, newest first.
    """
    case_id = case_key(connection, case_code)
    if case_id is None:
        return []
    layout = field_layout(connection)
    coordinators = _coordinator_codes(connection)
    out = []
    for day, obs, cov, stage, coordinator, at, by, why, kind in connection.execute(
            "SELECT c.day, c.observations, c.covariates, c.stage_known, c.coordinator_id, p.recorded_at,"
            " p.recorded_by, p.reason, c.contact_kind FROM contacts c LEFT JOIN contact_provenance p"
            " ON p.case_id = c.case_id AND p.day = c.day WHERE c.case_id = ? ORDER BY c.day", (case_id,)):
        values, covs = _decode(layout, obs, cov)
        out.append((day, 0, 0, ContactVersion(case_code, int(day), values, covs, stage or "",
                                               coordinators.get(coordinator, ""), CURRENT, at or "", by or "",
                                               why if why is not None else "import", contact_kind=kind)))
    if all_versions:
        for vid, day, obs, cov, stage, coordinator, status, at, by, why, ended_at, ended_by, reason, kind in \
                connection.execute(
                    "SELECT id, day, observations, covariates, stage_known, coordinator_id, status, recorded_at,"
                    " recorded_by, recorded_reason, ended_at, ended_by, reason, contact_kind FROM contact_versions"
                    " WHERE case_id = ?", (case_id,)):
            values, covs = _decode(layout, obs, cov)
            out.append((day, 1, -vid, ContactVersion(case_code, int(day), values, covs, stage or "",
                                                     coordinators.get(coordinator, ""), status, at, by, why,
                                                     ended_at, ended_by, reason, kind)))
    out.sort(key=lambda item: item[:3])
    return [item[3] for item in out]


def closed_cases(connection) -> dict:
    """{case code: CaseClosure} of every closed case."""
    return {code: CaseClosure(code, int(day), reason, at, by) for code, day, reason, at, by in connection.execute(
        "SELECT c.case_code, k.closed_day, k.reason, k.closed_at, k.closed_by FROM case_closures k"
        " JOIN cases c ON c.id = k.case_id")}


def case_closure(connection, case_code: str) -> CaseClosure | None:
    """The closure of one case, or None when it is open (reads that case only)."""
    row = connection.execute(
        "SELECT k.closed_day, k.reason, k.closed_at, k.closed_by FROM case_closures k JOIN cases c ON c.id = k.case_id"
        " WHERE c.case_code = ?", (case_code,)).fetchone()
    return None if row is None else CaseClosure(case_code, int(row[0]), row[1], row[2], row[3])


def open_case_mask(connection, case_codes, as_of_day: int | None) -> np.ndarray:
    """Which of ``case_codes`` are open on ``as_of_day`` (None: today and on, i.e. not closed at all).

    The one place for the rule: a case is closed from its closing day on, until it is reopened.

    Returns
    -------
    ndarray of bool, shape (n_cases,)
    """
    codes = np.asarray(case_codes, dtype=object)
    sql = "SELECT c.case_code FROM case_closures k JOIN cases c ON c.id = k.case_id"
    params = ()
    if as_of_day is not None:
        sql += " WHERE k.closed_day <= ?"
        params = (int(as_of_day),)
    closed = [row[0] for row in connection.execute(sql, params)]
    if not closed or not codes.size:
        return np.ones(codes.shape[0], dtype=bool)
    return ~np.isin(codes.astype(str), np.asarray(closed, dtype=str))


def last_contact_day(connection, case_id: int) -> int | None:
    row = connection.execute("SELECT MAX(day) FROM contacts WHERE case_id = ?", (case_id,)).fetchone()
    return None if row is None or row[0] is None else int(row[0])


def latest_contact_before(connection, case_code: str, day: int) -> ContactVersion | None:
    """The case's current contact with the latest date before ``day`` (for carrying covariates over)."""
    history = [v for v in contact_history(connection, case_code) if v.day < day]
    return history[-1] if history else None


# ------------------------------------------------------------------ writing (each: rows + audit entry)
def keep_earlier_versions(connection, keys, status: str, actor: str, reason: str) -> list:
    """Move the current versions of contacts ``keys`` [(case id, day)] to ``contact_versions``.

    The caller holds the write transaction and then deletes or replaces the rows in ``contacts``;
    the ids of the kept versions go to its audit entry (``RowChanges(rows={"contact_versions": ids})``).
    """
    at = _audit.utc_now()
    ids = []
    for case_id, day in keys:
        cursor = connection.execute(
            "INSERT INTO contact_versions (case_id, day, observations, covariates, stage_known, coordinator_id,"
            " contact_kind, status, recorded_at, recorded_by, recorded_reason, ended_at, ended_by, reason)"
            " SELECT c.case_id, c.day, c.observations, c.covariates, c.stage_known, c.coordinator_id,"
            " c.contact_kind, ?,"
            " COALESCE(p.recorded_at, ''), COALESCE(p.recorded_by, ''), COALESCE(p.reason, 'import'), ?, ?, ?"
            " FROM contacts c LEFT JOIN contact_provenance p ON p.case_id = c.case_id AND p.day = c.day"
            " WHERE c.case_id = ? AND c.day = ?", (status, at, actor, reason, int(case_id), int(day)))
        ids.append(int(cursor.lastrowid))
        connection.execute("DELETE FROM contact_provenance WHERE case_id = ? AND day = ?", (int(case_id), int(day)))
    return ids


def _closure_day(connection, case_id: int) -> int | None:
    row = connection.execute("SELECT closed_day FROM case_closures WHERE case_id = ?", (case_id,)).fetchone()
    return None if row is None else int(row[0])


def _refuse_if_closed(connection, case_code: str, case_id: int, day: int) -> None:
    closed = _closure_day(connection, case_id)
    if closed is not None and day >= closed:
        raise InputError(f"case {case_code!r} is closed since {_date(closed)}; reopen it first "
                         f"('caseview reopen'), nothing was stored")


def _coordinator_id(connection, code: str) -> int | None:
    if not code:
        return None
    connection.execute("INSERT OR IGNORE INTO coordinators (code) VALUES (?)", (code,))
    return int(connection.execute("SELECT id FROM coordinators WHERE code = ?", (code,)).fetchone()[0])


def _update_case_coordinator(connection, case_id: int) -> None:
    connection.execute(
        "UPDATE cases SET coordinator = COALESCE((SELECT co.code FROM contacts c JOIN coordinators co"
        " ON co.id = c.coordinator_id WHERE c.case_id = cases.id ORDER BY c.day DESC LIMIT 1), coordinator)"
        " WHERE id = ?", (case_id,))


def _encode_one(connection, batch: ContactBatch) -> tuple[bytes, bytes]:
    if batch.n_rows != 1:
        raise ValueError("one contact at a time")
    obs, covs = encode_batch(field_layout(connection), batch)
    return obs[0].tobytes(), np.ascontiguousarray(covs[0], dtype="<f8").tobytes()


def _as_version(connection, case_code: str, day: int, row, status: str) -> dict:
    layout = field_layout(connection)
    values, covs = _decode(layout, row[0], row[1])
    return {"date": _date(day), "values": values, "covariates": covs, "stage_known": row[2] or "",
            "coordinator": _coordinator_codes(connection).get(row[3], ""), "contact_kind": row[7], "status": status}


def _kind(batch: ContactBatch) -> str:
    """The one contact's kind as stored: 'scheduled' or 'unscheduled'."""
    return str(batch.contact_kinds()[0])


def record_contact(ws, batch: ContactBatch, actor: str, create_case: bool) -> dict:
    """Store one new contact (and its case when ``create_case``); audited as ``contact.record``.

    Refuses (InputError, nothing stored) a contact on a date the case already has, a new case that
    exists, an unknown case without ``create_case``, and a date on or after the case's closing.
    Returns the audit entry's details.
    """
    code, day = str(batch.case_codes[0]), int(batch.days[0])
    coordinator = str(batch.coordinators[0])
    with ws.transaction() as con:
        case_id = case_key(con, code)
        if case_id is None and not create_case:
            raise InputError(f"case {code!r} does not exist; give its coordinator to create it (nothing was stored)")
        if case_id is not None and create_case:
            raise InputError(f"case {code!r} already exists; record a contact for it instead (nothing was stored)")
        if case_id is None:  # the key is the database's (on PostgreSQL a coordinator sees only their cases)
            try:
                case_id = int(con.execute("INSERT INTO cases (case_code, coordinator) VALUES (?, ?)",
                                          (code, coordinator)).lastrowid)
            except sqlite3.IntegrityError:
                raise InputError(f"case {code!r} already exists and is not among the cases you can see "
                                 "(nothing was stored)") from None
        else:
            _refuse_if_closed(con, code, case_id, day)
            if _current_row(con, case_id, day) is not None:
                raise InputError(f"case {code!r} already has a contact on {_date(day)}; correct it with "
                                 "'caseview correct' (nothing was stored)")
            if not coordinator:
                coordinator = con.execute("SELECT coordinator FROM cases WHERE id = ?", (case_id,)).fetchone()[0]
        obs, cov = _encode_one(con, batch)
        con.execute("INSERT INTO contacts (case_id, day, observations, covariates, stage_known, coordinator_id,"
                    " contact_kind) VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (case_id, day, obs, cov, str(batch.stage_known[0]) or None, _coordinator_id(con, coordinator),
                     _kind(batch)))
        at = _audit.utc_now()
        con.execute("INSERT INTO contact_provenance (case_id, day, recorded_at, recorded_by, reason)"
                    " VALUES (?, ?, ?, ?, '')", (case_id, day, at, actor))
        _update_case_coordinator(con, case_id)
        new = _as_version(con, code, day, _current_row(con, case_id, day), CURRENT)
        case_packs.refresh_case_packs(con, [case_id])  # the packed contacts follow the rows (same transaction)
        details = {"case_id": code, "date": _date(day), "case_created": bool(create_case), "old": None, "new": new}
        _audit.append(con, actor, "contact.record", code, details, changes=_changes(con, code, case_id, [day]))
    return details


def correct_contact(ws, case_code: str, day: int, batch: ContactBatch, actor: str, reason: str) -> dict:
    """Replace the current version of the contact on ``day`` by ``batch`` (possibly on another date).

    The replaced version stays stored (superseded). Audited as ``contact.correct`` with old and new
    values and the reason. Returns the audit entry's details.
    """
    new_day = int(batch.days[0])
    with ws.transaction() as con:
        case_id = _existing_contact(con, case_code, day)
        old_row = _current_row(con, case_id, day)
        if new_day != day:
            if _current_row(con, case_id, new_day) is not None:
                raise InputError(f"case {case_code!r} already has a contact on {_date(new_day)}; correct or void "
                                 "that one instead (nothing was stored)")
            _refuse_if_closed(con, case_code, case_id, new_day)
        old = _as_version(con, case_code, day, old_row, SUPERSEDED)
        obs, cov = _encode_one(con, batch)
        coordinator = str(batch.coordinators[0])
        coordinator_id = _coordinator_id(con, coordinator) if coordinator else old_row[3]
        if (obs, cov, str(batch.stage_known[0]) or None, coordinator_id, _kind(batch), new_day) == \
                (*old_row[:4], old_row[7], day):
            raise InputError(f"case {case_code!r}, {_date(day)}: the correction changes nothing (nothing was stored)")
        kept = keep_earlier_versions(con, [(case_id, day)], SUPERSEDED, actor, reason)
        con.execute("DELETE FROM contacts WHERE case_id = ? AND day = ?", (case_id, day))
        con.execute("INSERT INTO contacts (case_id, day, observations, covariates, stage_known, coordinator_id,"
                    " contact_kind) VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (case_id, new_day, obs, cov, str(batch.stage_known[0]) or None, coordinator_id, _kind(batch)))
        con.execute("INSERT INTO contact_provenance (case_id, day, recorded_at, recorded_by, reason)"
                    " VALUES (?, ?, ?, ?, ?)", (case_id, new_day, _audit.utc_now(), actor, reason))
        _update_case_coordinator(con, case_id)
        new = _as_version(con, case_code, new_day, _current_row(con, case_id, new_day), CURRENT)
        case_packs.refresh_case_packs(con, [case_id])  # the packed contacts follow the rows (same transaction)
        details = {"case_id": case_code, "date": _date(day), "reason": reason, "old": old, "new": new}
        _audit.append(con, actor, "contact.correct", case_code, details,
                      changes=_changes(con, case_code, case_id, [day, new_day], kept))
    return details


def void_contact(ws, case_code: str, day: int, actor: str, reason: str) -> dict:
    """Void the contact on ``day``: it leaves the current contacts and stays stored (voided).

    Audited as ``contact.void`` with the old values and the reason. Returns the audit details.
    """
    with ws.transaction() as con:
        case_id = _existing_contact(con, case_code, day)
        old = _as_version(con, case_code, day, _current_row(con, case_id, day), VOIDED)
        kept = keep_earlier_versions(con, [(case_id, day)], VOIDED, actor, reason)
        con.execute("DELETE FROM contacts WHERE case_id = ? AND day = ?", (case_id, day))
        _update_case_coordinator(con, case_id)
        case_packs.refresh_case_packs(con, [case_id])  # the packed contacts follow the rows (same transaction)
        details = {"case_id": case_code, "date": _date(day), "reason": reason, "old": old, "new": None}
        _audit.append(con, actor, "contact.void", case_code, details,
                      changes=_changes(con, case_code, case_id, [day], kept))
    return details


def _changes(connection, case_code: str, case_id: int, days, version_ids=()) -> RowChanges:
    """The protected rows a contact change touched: the case (its contacts), the provenance rows of
    ``days``, the versions kept and the coordinators (one may have been added)."""
    return RowChanges(cases=[case_code], all_rows=("coordinators",),
                      rows={"contact_provenance": [f"{case_id}:{int(d)}" for d in days],
                            "contact_versions": list(version_ids)})


def _existing_contact(connection, case_code: str, day: int) -> int:
    case_id = case_key(connection, case_code)
    if case_id is None:
        raise InputError(f"case {case_code!r} does not exist (nothing was stored)")
    if _current_row(connection, case_id, day) is None:
        days = [_date(d) for (d,) in connection.execute(
            "SELECT day FROM contacts WHERE case_id = ? ORDER BY day DESC LIMIT 5", (case_id,))]
        recent = f"; latest contacts: {', '.join(days)}" if days else "; it has no current contacts"
        raise InputError(f"case {case_code!r} has no current contact on {_date(day)}{recent} (nothing was stored)")
    return case_id


def close_case(ws, case_code: str, day: int, reason: str, actor: str) -> dict:
    """Close a case from ``day`` for one of :data:`CLOSE_REASONS`; audited as ``case.close``."""
    if reason not in CLOSE_REASONS:
        raise InputError(f"closing reason {reason!r}: expected one of {', '.join(CLOSE_REASONS)}")
    with ws.transaction() as con:
        case_id = case_key(con, case_code)
        if case_id is None:
            raise InputError(f"case {case_code!r} does not exist (nothing was stored)")
        already = _closure_day(con, case_id)
        if already is not None:
            raise InputError(f"case {case_code!r} is already closed since {_date(already)} (nothing was stored)")
        last = last_contact_day(con, case_id)
        if last is not None and day < last:
            raise InputError(f"case {case_code!r}: closing date {_date(day)} is before its latest contact "
                             f"({_date(last)}); expected a date on or after it (nothing was stored)")
        details = {"case_id": case_code, "closed_on": _date(day), "reason": reason}
        at = _audit.utc_now()  # the row names its audit entry: written first, the entry follows (same lock)
        con.execute("PRAGMA defer_foreign_keys = ON")  # checked at commit, when the entry exists
        con.execute("INSERT INTO case_closures (case_id, closed_day, reason, closed_at, closed_by, audit_id)"
                    " VALUES (?, ?, ?, ?, ?, ?)", (case_id, int(day), reason, at, actor, _audit.next_entry_id(con)))
        _audit.append(con, actor, "case.close", case_code, details, at_utc=at,
                      changes=RowChanges(rows={"case_closures": [case_id]}))
    return details


def reopen_case(ws, case_code: str, actor: str) -> dict:
    """Reopen a closed case; audited as ``case.reopen`` with the closing it ends."""
    with ws.transaction() as con:
        case_id = case_key(con, case_code)
        if case_id is None:
            raise InputError(f"case {case_code!r} does not exist (nothing was stored)")
        row = con.execute("SELECT closed_day, reason, closed_at, closed_by FROM case_closures WHERE case_id = ?",
                          (case_id,)).fetchone()
        if row is None:
            raise InputError(f"case {case_code!r} is not closed (nothing was stored)")
        details = {"case_id": case_code, "old": {"closed_on": _date(row[0]), "reason": row[1], "closed_at": row[2],
                                                 "closed_by": row[3]}, "new": None}
        con.execute("DELETE FROM case_closures WHERE case_id = ?", (case_id,))
        _audit.append(con, actor, "case.reopen", case_code, details, changes=RowChanges(rows={"case_closures": [case_id]}))
    return details
