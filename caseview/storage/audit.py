"""The tamper-evident audit trail: an append-only, hash-chained table.

Every entry stores its UTC time, actor, action, target, details (JSON), the previous entry's hash
and its own SHA-256 hash over all of that. Changing, deleting or reordering any entry breaks the
chain from that entry on (hash chaining after Schneier & Kelsey, "Secure audit logs to support
computer forensics", 1999). The intent is an audit trail that never obscures earlier entries
(21 CFR 11.10(e)). SQL triggers refuse UPDATE and DELETE on the table to stop casual edits; the
evidence of tampering comes from the chain. A chain alone cannot reveal a complete rewrite or the
removal of the newest entries, which is why every export and report prints the chain head: an
outside copy of the head later proves that history up to it was not rewritten.

Records protected beyond the chain: an entry whose write changed protected rows carries, under
``details["row_digests"]``, set digests of the rows it added and removed
(:mod:`caseview.storage.row_digests`); :func:`verify` replays them and checks every stored record
(:mod:`caseview.storage.row_check`). Writers pass ``changes=RowChanges(...)`` to :func:`append`.

The actor is a name (the operating-system user unless given), i.e. attribution, not
authentication - on SQLite. On PostgreSQL the server appends every entry (the SECURITY DEFINER
function ``caseview_audit_append`` of :mod:`caseview.storage.postgres_roles`), in the writer's
transaction, with the actor taken from ``session_user``: the login the server authenticated.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from dataclasses import dataclass

GENESIS_HASH = "0" * 64


@dataclass(frozen=True)
class AuditEntry:
    """One audit-trail entry (``details`` is the decoded JSON object)."""

    id: int
    at_utc: str
    actor: str
    action: str
    target: str
    details: dict
    prev_hash: str
    entry_hash: str


@dataclass(frozen=True)
class AuditVerification:
    """Result of recomputing the chain; ``first_bad_id`` names the first entry that fails."""

    ok: bool
    n_entries: int
    first_bad_id: int | None
    problem: str
    head_hash: str
    n_records: int = 0          # protected records checked against the trail (0 = not checked)
    rows_checked: bool = False


def canonical_json(value) -> str:
    """Canonical JSON: sorted keys, no insignificant whitespace, UTF-8 characters kept."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def entry_hash(entry_id: int, at_utc: str, actor: str, action: str, target: str, details_json: str,
               prev_hash: str) -> str:
    """SHA-256 (hex) over the canonical serialisation of one entry's fields."""
    payload = canonical_json([int(entry_id), at_utc, actor, action, target, details_json, prev_hash])
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _on_server(connection) -> bool:
    """True on a PostgreSQL workspace: entries are appended by the server (see :mod:`.postgres_roles`)."""
    return getattr(connection, "kind", None) == "postgresql"


def next_entry_id(connection) -> int:
    """The id the next appended entry will get (stable while the caller holds the write transaction)."""
    if _on_server(connection):  # the audit table is not readable by every role; the server holds the id
        return int(connection.execute("SELECT caseview_next_audit_id()").fetchone()[0])
    row = connection.execute("SELECT MAX(id) FROM audit_log").fetchone()
    return (row[0] or 0) + 1


def audit_actor(connection, given: str) -> str:
    """Who an entry records: the given name on SQLite (attribution); on PostgreSQL the connection
    decides (:meth:`caseview.storage.pg_connection.PgConnection.audit_actor`, the place where the
    server's ``session_user`` takes over)."""
    choose = getattr(connection, "audit_actor", None)
    return given if choose is None else choose(given)


def append(connection, actor: str, action: str, target: str, details: dict, changes=None,
           at_utc: str | None = None) -> AuditEntry:
    """Append one entry; the caller holds a write transaction (BEGIN IMMEDIATE).

    Parameters
    ----------
    changes : caseview.storage.row_digests.RowChanges, optional
        The protected rows this write added, changed or removed. Call ``append`` AFTER writing them,
        in the same transaction: their digests go into ``details["row_digests"]``.
    at_utc : str, optional
        The entry's time (default now), for a row that stores its entry's time.
    """
    actor = audit_actor(connection, actor)
    details = dict(details or {})
    if changes is not None:
        from .row_digests import record_row_changes

        rows = record_row_changes(connection, changes)
        if rows:
            details["row_digests"] = rows
    details_json = canonical_json(details)
    if _on_server(connection):  # id, chain, hash and the actor (session_user) are decided by the server
        row = connection.execute("SELECT entry_id, entry_at, entry_actor, entry_prev, entry_hash_hex FROM "
                                 "caseview_audit_append(?, ?, ?, ?)", (action, target, details_json, at_utc)).fetchone()
        return AuditEntry(int(row[0]), row[1], row[2], action, target, json.loads(details_json), row[3], row[4])
    row = connection.execute("SELECT id, entry_hash FROM audit_log ORDER BY id DESC LIMIT 1").fetchone()
    entry_id, prev = (row[0] + 1, row[1]) if row else (1, GENESIS_HASH)
    at = at_utc or utc_now()
    digest = entry_hash(entry_id, at, actor, action, target, details_json, prev)
    connection.execute(
        "INSERT INTO audit_log (id, at_utc, actor, action, target, details_json, prev_hash, entry_hash)"
        " VALUES (?, ?, ?, ?, ?, ?, ?, ?)", (entry_id, at, actor, action, target, details_json, prev, digest))
    return AuditEntry(entry_id, at, actor, action, target, json.loads(details_json), prev, digest)


def head(connection) -> str:
    if _on_server(connection):  # every team role may know the head (it tells nothing about any case)
        return connection.execute("SELECT head_hash FROM caseview_audit_head()").fetchone()[0]
    row = connection.execute("SELECT entry_hash FROM audit_log ORDER BY id DESC LIMIT 1").fetchone()
    return row[0] if row else GENESIS_HASH


def _entry(row) -> AuditEntry:
    try:
        details = json.loads(row[5])
    except (TypeError, ValueError):
        details = {"unreadable_details": str(row[5])}
    return AuditEntry(row[0], row[1], row[2], row[3], row[4], details, row[6], row[7])


def entries(connection, case_id: str | None = None, since_utc: str | None = None) -> list[AuditEntry]:
    """Entries in id order, optionally about one case and/or at or after a UTC date/time.

    An entry is about a case when its target is the case code (or ``case:CODE``), or its details
    name the case in ``case_id`` or in the list ``case_ids``.
    """
    sql = "SELECT id, at_utc, actor, action, target, details_json, prev_hash, entry_hash FROM audit_log"
    params = []
    if since_utc:
        sql += " WHERE at_utc >= ?"
        params.append(since_utc)
    sql += " ORDER BY id"
    out = [_entry(r) for r in connection.execute(sql, params)]
    if case_id is not None:
        def about(e: AuditEntry) -> bool:
            d = e.details if isinstance(e.details, dict) else {}
            ids = d.get("case_ids")
            return (e.target in (case_id, f"case:{case_id}") or d.get("case_id") == case_id
                    or (isinstance(ids, list) and case_id in ids))
        out = [e for e in out if about(e)]
    return out


def verify(connection, rows: bool = True) -> AuditVerification:
    """Recompute the chain from the first entry (stop at the first that fails); then, with ``rows``,
    check every protected record against the trail (:func:`caseview.storage.row_check.check_rows`)."""
    chain = _verify_chain(connection)
    if rows and _on_server(connection) and not connection.execute(
            "SELECT has_table_privilege('public.cases', 'SELECT')").fetchone()[0]:
        rows = False  # a team auditor reads the trail only; the records check needs a role that reads every case
    if not chain.ok or not rows:
        return chain
    from .row_check import check_rows

    result = check_rows(connection, ((e.id, e.details) for e in entries(connection)))
    return AuditVerification(result.ok, chain.n_entries, None, result.problem, chain.head_hash,
                             n_records=result.n_records, rows_checked=True)


def position_of(connection, entry_hash_text: str) -> tuple[int | None, int]:
    """(id of the entry with this hash or None, id of the newest entry)."""
    row = connection.execute("SELECT id FROM audit_log WHERE entry_hash = ?", (entry_hash_text.strip().lower(),)).fetchone()
    newest = connection.execute("SELECT MAX(id) FROM audit_log").fetchone()[0] or 0
    return (row[0] if row else None), newest


def _verify_chain(connection) -> AuditVerification:
    prev = GENESIS_HASH
    expected_id = 1
    n = 0
    cursor = connection.execute(
        "SELECT id, at_utc, actor, action, target, details_json, prev_hash, entry_hash FROM audit_log ORDER BY id")
    for row in cursor:
        entry_id, at, actor, action, target, details_json, prev_hash, stored = row
        n += 1
        if entry_id != expected_id:
            return AuditVerification(False, n, entry_id, f"entry {entry_id}: expected entry {expected_id} next; "
                                     f"entries {expected_id}..{entry_id - 1} are missing (deleted)", prev)
        if prev_hash != prev:
            return AuditVerification(False, n, entry_id, f"entry {entry_id}: its previous-entry hash does not match "
                                     "entry {0} (an entry was deleted, inserted or reordered)".format(entry_id - 1), prev)
        try:
            recomputed = entry_hash(entry_id, at, actor, action, target, details_json, prev_hash)
        except (TypeError, ValueError):
            recomputed = None
        if recomputed != stored:
            return AuditVerification(False, n, entry_id, f"entry {entry_id}: its contents do not match its hash "
                                     "(the entry was edited)", prev)
        prev = stored
        expected_id += 1
    return AuditVerification(True, n, None, "", prev)
