"""Digests of the records the audit trail protects, so that a row edited outside caseview is found.

Every protected record (an *element*) has a SHA-256 digest of its canonical content:

* ``cases``: one element per case: the case row (code, coordinator) and all its contacts (day,
  observation and covariate bytes, known stage, coordinator, contact kind), in day order;
* one element per row of ``reviews``, ``model_versions``, ``settings``, ``channels``, ``categories``,
  ``covariates`` and ``coordinators``;
* ``score_runs``: one element per saved run (the run row and all its per-case scores).

A *set digest* is the sum of the element digests modulo 2**256 (an additive multiset hash: Bellare &
Micciancio, "A New Paradigm for Collision-free Hashing: Incrementality at Reduced Cost", EUROCRYPT
1997, the MuHASH/AdHASH family), so a change needs only the digests of the elements it touched:
every audit entry that changes records stores, per set, the sum of the digests it added and the sum
of those it removed (:func:`record_row_changes`). Replaying the trail gives the expected digest of
each set now; :func:`check_rows` compares it with the digests of the rows actually stored and names
the first row that differs. The table ``row_digests`` keeps each element's last recorded digest; it
is only a locator (to say *which* row differs and to supply the "removed" digest of a change), the
evidence is the trail.

THE HOOK: every write path calls :func:`caseview.storage.audit.append` with
``changes=RowChanges(...)`` naming what it touched, inside the same transaction and after its rows
are written. See DEVELOPERS.md, "Writing to a workspace".
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field

import numpy as np

MODULUS = 1 << 256
#: Elements listed by key in an audit entry when a change touches at most this many of a set.
KEYS_IN_ENTRY = 20
CASES = "cases"
SCORE_RUNS = "score_runs"

#: Protected row tables: set name -> (SELECT returning key first then the row's values, key column).
ROW_TABLES = {
    "reviews": ("SELECT r.id, c.case_code, r.status, r.note, r.actor, r.at_utc, r.flags, r.p_follow_up, r.as_of, "
                "r.audit_id FROM reviews r LEFT JOIN cases c ON c.id = r.case_id", "r.id"),
    "model_versions": ("SELECT id, created_utc, note, json_text, fit_summary, is_current FROM model_versions", "id"),
    "settings": ("SELECT key, value FROM settings", "key"),
    "channels": ("SELECT id, name, position FROM channels", "id"),
    "categories": ("SELECT channel_id || ':' || code, channel_id, code, label FROM categories",
                   "channel_id || ':' || code"),
    "covariates": ("SELECT id, name, position FROM covariates", "id"),
    "coordinators": ("SELECT id, code FROM coordinators", "id"),
    # case work (casework_store): earlier contact versions, who recorded current contacts, closed cases
    "contact_versions": ("SELECT v.id, c.case_code, v.day, v.observations, v.covariates, v.stage_known, "
                         "v.coordinator_id, v.contact_kind, v.status, v.recorded_at, v.recorded_by, v.recorded_reason, v.ended_at, "
                         "v.ended_by, v.reason, v.audit_id FROM contact_versions v LEFT JOIN cases c ON c.id = v.case_id",
                         "v.id"),
    "contact_provenance": ("SELECT p.case_id || ':' || p.day, c.case_code, p.day, p.recorded_at, p.recorded_by, "
                           "p.reason FROM contact_provenance p LEFT JOIN cases c ON c.id = p.case_id",
                           "p.case_id || ':' || p.day"),
    "case_closures": ("SELECT k.case_id, c.case_code, k.closed_day, k.reason, k.closed_at, k.closed_by, k.audit_id "
                      "FROM case_closures k LEFT JOIN cases c ON c.id = k.case_id", "k.case_id"),
}
#: Every protected set, in the order :func:`check_rows` reports them.
SETS = (CASES, *ROW_TABLES, SCORE_RUNS)
LAYOUT_TABLES = ("channels", "categories", "covariates")


@dataclass(frozen=True)
class RowChanges:
    """What one audited write changed; give it to :func:`caseview.storage.audit.append`.

    Attributes
    ----------
    cases : iterable of str
        Case codes whose case row or contacts were added, changed or removed.
    rows : dict of str -> iterable
        Protected set name (see :data:`SETS`) -> keys of the rows added, changed or removed
        (``{"reviews": [17]}``, ``{"settings": ["rules"]}``, ``{"score_runs": [4]}``).
    all_cases : bool
        Every case may have changed (e.g. a new channel widened every contact).
    all_rows : iterable of str
        Sets rewritten as a whole (every key is re-read).
    case_digests : dict of str -> bytes
        Digests of NEW cases already worked out by the writer (:func:`case_digests_from_arrays`),
        so a large import does not read its own rows back.
    """

    cases: tuple = ()
    rows: dict = field(default_factory=dict)
    all_cases: bool = False
    all_rows: tuple = ()
    case_digests: dict = field(default_factory=dict)

    @classmethod
    def everything(cls) -> "RowChanges":
        return cls(all_cases=True, all_rows=tuple(SETS[1:]))


# ---------------------------------------------------------------------------- canonical content
def _text_digest(text, cache: dict) -> bytes:
    value = cache.get(text)
    if value is None:
        value = hashlib.sha256(("" if text is None else str(text)).encode("utf-8")).digest()[:16]
        cache[text] = value
    return value


def _case_header(code: str, coordinator: str) -> bytes:
    return b"caseview.case.v1\x00" + str(code).encode("utf-8") + b"\x00" + str(coordinator or "").encode("utf-8") + b"\x00"


def case_digests_from_arrays(codes, case_coordinators, offsets, days, observations, covariates, stage_known,
                             coordinators, unscheduled=None) -> list:
    """Digests of many cases at once from aligned arrays (the import's fast path).

    Parameters
    ----------
    codes, case_coordinators : sequence of str, length m
    offsets : ndarray of int64, shape (m + 1,)   rows of case i are ``offsets[i]:offsets[i + 1]``, in day order
    days : ndarray of int64, shape (n,)
    observations : ndarray of uint8, shape (n, n_channels)     the stored bytes
    covariates : ndarray of float64, shape (n, n_covariates)   stored as little-endian float64
    stage_known, coordinators : sequence of str, length n      '' = none
    unscheduled : ndarray of bool, shape (n,), or None        contact_kind 'unscheduled' (None = all scheduled);
        one byte per contact (0 scheduled, 1 unscheduled)

    Returns
    -------
    list of bytes (32 each), length m
    """
    n = int(days.shape[0])
    n_obs = observations.shape[1] if observations.ndim == 2 else 0
    cov = np.ascontiguousarray(covariates, dtype="<f8").reshape(n, -1)
    width = 8 + 2 + 16 + 16 + 1 + n_obs + 8 * cov.shape[1]
    records = np.empty((n, width), dtype=np.uint8)
    records[:, 0:8] = np.ascontiguousarray(days, dtype="<i8").reshape(n, 1).view(np.uint8)
    records[:, 8:10] = np.full((n, 1), n_obs, dtype="<u2").view(np.uint8)
    import pandas as pd

    cache: dict = {}
    for start, texts in ((10, stage_known), (26, coordinators)):
        inverse, values = pd.factorize(np.asarray(texts, dtype=object), use_na_sentinel=False)
        table = np.frombuffer(b"".join(_text_digest(v if isinstance(v, str) else "", cache) for v in values.tolist())
                              or b"", dtype=np.uint8).reshape(len(values), 16)
        if n:
            records[:, start:start + 16] = table[inverse]
    records[:, 42] = 0 if unscheduled is None else np.asarray(unscheduled, dtype=bool).reshape(n)
    records[:, 43:43 + n_obs] = observations
    records[:, 43 + n_obs:] = cov.view(np.uint8).reshape(n, -1)
    buffer = memoryview(records.reshape(-1))
    bounds = (np.asarray(offsets, dtype=np.int64) * width).tolist()
    sha256 = hashlib.sha256
    return [sha256(_case_header(code, coordinator) + buffer[bounds[i]:bounds[i + 1]]).digest()
            for i, (code, coordinator) in enumerate(zip(codes, case_coordinators))]


# CAST: a contact widened with ``||`` (a new channel or covariate) holds text-typed bytes
_CASE_ROWS = ("SELECT cs.case_code, cs.coordinator, c.day, CAST(c.observations AS BLOB), CAST(c.covariates AS BLOB), "
              "c.stage_known, co.code, c.contact_kind "
              "FROM cases cs LEFT JOIN contacts c ON c.case_id = cs.id "
              "LEFT JOIN coordinators co ON co.id = c.coordinator_id {where} ORDER BY cs.case_code, c.day")


def _case_digests_from_rows(rows) -> dict:
    """Case code -> digest, from rows of :data:`_CASE_ROWS` (the portable reference path)."""
    out, cache = {}, {}
    current, h = None, None
    for code, coordinator, day, obs, cov, stage, contact_coordinator, kind in rows:
        if code != current:
            if h is not None:
                out[current] = h.digest()
            current, h = code, hashlib.sha256(_case_header(code, coordinator))
        if day is None:  # a case without contacts
            continue
        obs, cov = bytes(obs or b""), bytes(cov or b"")
        h.update(int(day).to_bytes(8, "little", signed=True) + len(obs).to_bytes(2, "little")
                 + _text_digest(stage or "", cache) + _text_digest(contact_coordinator or "", cache)
                 + (b"\x01" if kind == "unscheduled" else b"\x00") + obs + cov)
    if h is not None:
        out[current] = h.digest()
    return out


def _all_case_digests(connection) -> dict:
    """Every case's digest through the fast aggregated read (:func:`~.contacts.fetch_contacts`)."""
    from .contacts import fetch_contacts

    stored = fetch_contacts(connection, method="aggregate")  # the rows themselves (the record), never the packs
    case_rows = dict(connection.execute("SELECT case_code, coordinator FROM cases").fetchall())
    codes = stored.case_codes.tolist()
    if len(set(codes) - set(case_rows)):
        raise ValueError("contacts of a case that is not in the cases table")
    out = dict(zip(codes, case_digests_from_arrays(
        codes, [case_rows[c] for c in codes], stored.offsets, stored.days, stored.observations,
        stored.covariates, stored.stage_known, stored.coordinators, stored.unscheduled)))
    for code, coordinator in case_rows.items():
        if code not in out:  # a case without contacts
            out[code] = hashlib.sha256(_case_header(code, coordinator)).digest()
    return out


def current_case_digests(connection, codes=None) -> dict:
    """Case code -> digest of the stored case (all cases, or only ``codes``; absent cases are left out)."""
    if codes is None:
        try:
            return _all_case_digests(connection)
        except Exception:  # a damaged or inconsistent file: the row-by-row reference path says which case
            return _case_digests_from_rows(connection.execute(_CASE_ROWS.format(where="")))
    codes = sorted(set(map(str, codes)))
    out = {}
    for start in range(0, len(codes), 500):
        chunk = codes[start:start + 500]
        where = f"WHERE cs.case_code IN ({','.join('?' * len(chunk))})"
        out.update(_case_digests_from_rows(connection.execute(_CASE_ROWS.format(where=where), chunk)))
    return out


def _value(value):
    if isinstance(value, float):
        return ["f", float.hex(value)]
    if isinstance(value, (bytes, memoryview)):
        return ["b", bytes(value).hex()]
    return value


def _row_digest(name: str, row) -> bytes:
    text = json.dumps([name, [_value(v) for v in row]], ensure_ascii=False, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).digest()


def current_row_digests(connection, name: str, keys=None) -> dict:
    """Key (as text) -> digest of the stored rows of a protected set (all, or only ``keys``)."""
    if name == CASES:
        return current_case_digests(connection, keys)
    if name == SCORE_RUNS:
        return _score_run_digests(connection, keys)
    select, key_column = ROW_TABLES[name]
    if keys is None:
        rows = connection.execute(select).fetchall()
    else:
        keys = [str(k) for k in keys]
        rows = []
        for start in range(0, len(keys), 500):
            chunk = keys[start:start + 500]
            rows += connection.execute(f"{select} WHERE CAST({key_column} AS TEXT) IN ({','.join('?' * len(chunk))})",
                                       chunk).fetchall()
    return {str(row[0]): _row_digest(name, row) for row in rows}


def _score_run_digests(connection, keys=None) -> dict:
    where, params = "", []
    if keys is not None:
        keys = [int(k) for k in keys]
        if not keys:
            return {}
        where, params = f"WHERE r.id IN ({','.join('?' * len(keys))})", keys
    out = {}
    for run_id, as_of, horizon, version, created in connection.execute(
            f"SELECT r.id, r.as_of, r.horizon_days, r.model_version, r.created_utc FROM score_runs r {where}",
            params).fetchall():
        h = hashlib.sha256(_row_digest(SCORE_RUNS, (run_id, as_of, horizon, version, created)))
        for row in connection.execute(
                "SELECT c.case_code, s.p_follow_up_now, s.p_reach_follow_up, s.flags FROM case_scores s "
                "LEFT JOIN cases c ON c.id = s.case_id WHERE s.run_id = ? ORDER BY c.case_code", (run_id,)):
            h.update(_row_digest("case_scores", row))
        out[str(run_id)] = h.digest()
    return out


# ---------------------------------------------------------------------------- the hook
def _number(digest: bytes | None) -> int:
    return int.from_bytes(digest, "big") if digest else 0


def _hex(number: int) -> str:
    return f"{number % MODULUS:064x}"


def record_row_changes(connection, changes: RowChanges) -> dict:
    """Work out the digest changes of one write and update the locator; returns the entry's ``rows`` record.

    Call inside the write's transaction after its rows are written (``audit.append`` does this).

    Returns
    -------
    dict
        ``{set: {"added": hex, "removed": hex, "count": net change in elements, "keys": {key: hex or
        None}}}`` for every set that changed (``keys`` only for small changes).
    """
    wanted: dict = {}
    for name, keys in (changes.rows or {}).items():
        if name not in SETS:
            raise ValueError(f"unknown protected set {name!r} (known: {', '.join(SETS)})")
        wanted.setdefault(name, set()).update(str(k) for k in keys)
    if changes.cases:
        wanted.setdefault(CASES, set()).update(str(c) for c in changes.cases)
    record = {}
    whole = set(changes.all_rows) | ({CASES} if changes.all_cases else set())
    for name in SETS:
        precomputed = {str(k): v for k, v in changes.case_digests.items()} if name == CASES else {}
        if name not in whole and name not in wanted and not precomputed:
            continue
        if name in whole:
            new = current_row_digests(connection, name)
            old = dict(connection.execute("SELECT key, digest FROM row_digests WHERE set_name = ?", (name,)).fetchall())
            keys = set(new) | set(old)
        else:
            keys = set(wanted.get(name, ()))
            new = current_row_digests(connection, name, keys) if keys else {}
            old = _stored(connection, name, keys)
        added = removed = count = 0
        listed = {}
        upserts, deletes = [], []
        if precomputed:  # new cases (an import): nothing was recorded for them before
            fresh = [(key, digest) for key, digest in precomputed.items() if key not in keys]
            added = sum(int.from_bytes(digest, "big") for _, digest in fresh)
            count = len(fresh)
            upserts = [(name, key, digest.hex()) for key, digest in fresh]
            if len(fresh) <= KEYS_IN_ENTRY:
                listed.update((key, digest.hex()) for key, digest in fresh)
            else:
                listed[None] = None  # too many to list
        for key in keys:
            before = old.get(key)
            after = new.get(key)
            after_hex = after.hex() if isinstance(after, bytes) else after
            if before == after_hex:
                continue
            removed += _number(bytes.fromhex(before)) if before else 0
            added += _number(bytes.fromhex(after_hex)) if after_hex else 0
            count += (after_hex is not None) - (before is not None)
            listed[key] = after_hex
            if after_hex is None:
                deletes.append((name, key))
            else:
                upserts.append((name, key, after_hex))
        if not listed:
            continue
        bulk = listed.pop(None, False) is None
        connection.executemany("INSERT INTO row_digests (set_name, key, digest) VALUES (?, ?, ?) "
                               "ON CONFLICT(set_name, key) DO UPDATE SET digest = excluded.digest", upserts)
        connection.executemany("DELETE FROM row_digests WHERE set_name = ? AND key = ?", deletes)
        entry = {"added": _hex(added), "removed": _hex(removed), "count": count}
        if not bulk and len(listed) <= KEYS_IN_ENTRY:
            entry["keys"] = dict(sorted(listed.items()))
        record[name] = entry
    return record


def _stored(connection, name: str, keys) -> dict:
    keys = list(keys)
    out = {}
    for start in range(0, len(keys), 500):
        chunk = keys[start:start + 500]
        out.update(connection.execute(
            f"SELECT key, digest FROM row_digests WHERE set_name = ? AND key IN ({','.join('?' * len(chunk))})",
            [name, *chunk]).fetchall())
    return out
