"""Write a validated batch of contacts in one transaction: add, skip exact duplicates, replace.

The batch comes from :mod:`caseview.timeline_io` already validated against the current model and
free of duplicates within itself. Conflicts with stored contacts (same case and day, different
values) raise :class:`ContactConflicts` unless ``replace`` is set; the caller's transaction then
rolls back, so nothing is written.
"""

from __future__ import annotations

import gc
import hashlib
from dataclasses import dataclass, field

import numpy as np

from ..errors import WorkspaceError
from . import case_packs
from .contacts import field_layout
from .row_digests import RowChanges, case_digests_from_arrays
from .schema import BLANK_CODE


@dataclass(frozen=True)
class ContactBatch:
    """Validated contacts to store (all arrays aligned, n rows, unique (case, day)).

    case_codes : ndarray of object (n,)
    days : ndarray of int64 (n,)           days since 1970-01-01
    coordinators : ndarray of object (n,)  '' = blank
    channel_names : tuple of str           the model's channels, in column order of ``channel_values``
    channel_categories : tuple of tuple    the model's categories per channel
    channel_values : ndarray of int16 (n, n_channels)   model category index, -1 = blank
    covariate_names : tuple of str
    covariates : ndarray of float64 (n, n_covariates)
    stage_known : ndarray of object (n,)   '' = none, else 'A|B' in model stage order
    unscheduled : ndarray of bool (n,) or None   contact_kind "unscheduled" (None = all scheduled)
    """

    case_codes: np.ndarray
    days: np.ndarray
    coordinators: np.ndarray
    channel_names: tuple
    channel_categories: tuple
    channel_values: np.ndarray
    covariate_names: tuple
    covariates: np.ndarray
    stage_known: np.ndarray
    unscheduled: np.ndarray | None = None

    @property
    def n_rows(self) -> int:
        return int(self.days.shape[0])

    def contact_kinds(self) -> np.ndarray:
        """ndarray of object (n,): 'scheduled' or 'unscheduled' for each row (the stored text)."""
        kinds = np.full(self.n_rows, "scheduled", dtype=object)
        if self.unscheduled is not None:
            kinds[np.asarray(self.unscheduled, dtype=bool)] = "unscheduled"
        return kinds


@dataclass
class ContactConflicts(Exception):
    """Batch rows (indices) that clash with stored contacts of the same case and day."""

    rows: list
    differing: list = field(default_factory=list)  # per row: names of the differing fields


@dataclass(frozen=True)
class WriteCounts:
    cases_added: int
    contacts_added: int
    duplicates_skipped: int
    replaced: int
    replaced_details: list  # [{"case_id", "day", "old_sha256", "new_sha256"}]
    row_changes: RowChanges | None = None  # give to the audit entry of this write (audit.append(changes=...))


def _row_digest(obs: bytes, cov: bytes, stage: str | None, coordinator: str) -> str:
    h = hashlib.sha256()
    for part in (obs, cov, (stage or "").encode("utf-8"), coordinator.encode("utf-8")):
        h.update(len(part).to_bytes(8, "little"))
        h.update(part)
    return h.hexdigest()


def _blobs(array: np.ndarray) -> list:
    data = np.ascontiguousarray(array).tobytes()
    width = array.shape[1] * array.dtype.itemsize if array.ndim == 2 else 0
    if width == 0:
        return [b""] * array.shape[0]
    return [data[i:i + width] for i in range(0, len(data), width)]


def encode_batch(layout, batch: ContactBatch) -> tuple[np.ndarray, np.ndarray]:
    """The batch's values in the stored layout.

    Returns
    -------
    observations : ndarray of uint8, shape (n, n_workspace_channels)
        Workspace category codes, :data:`~caseview.storage.schema.BLANK_CODE` = blank.
    covariates : ndarray of little-endian float64, shape (n, n_workspace_covariates)
        NaN where the batch has no such covariate.
    """
    n = batch.n_rows
    obs = np.full((n, len(layout.channels)), BLANK_CODE, dtype=np.uint8)
    for j, name in enumerate(batch.channel_names):
        position = layout.channel_position(name)
        if position is None:
            raise WorkspaceError(f"channel {name!r} is not registered in the workspace (model changed during import?)")
        codes = layout.channels[position][1]
        lookup = np.array([codes[c] for c in batch.channel_categories[j]] + [BLANK_CODE], dtype=np.uint8)
        obs[:, position] = lookup[batch.channel_values[:, j]]  # -1 -> last entry = blank
    covs = np.full((n, len(layout.covariates)), np.nan, dtype="<f8")
    for k, name in enumerate(batch.covariate_names):
        position = layout.covariate_position(name)
        if position is None:
            raise WorkspaceError(f"covariate {name!r} is not registered in the workspace")
        covs[:, position] = batch.covariates[:, k]
    return obs, covs


#: Contacts turned into Python objects at a time while writing (bounds the memory of a million-case import).
ROWS_PER_STEP = 250_000


@dataclass
class _Rows:
    """Where each batch row goes: its stored case id and coordinator id (see :func:`_assign_ids`)."""

    row_case: np.ndarray          # (n,) int64 stored case id
    row_coordinator: np.ndarray   # (n,) object: coordinators.id or None
    coordinator_code: dict        # coordinators.id -> code (None -> '')
    case_id: dict                 # case code -> stored id (stored and new)
    new_codes: list               # codes of the cases this batch adds, in code order
    next_id: int                  # the first id given to a new case
    order: np.ndarray             # (n,) batch rows sorted by (case id, day)
    is_new_case: np.ndarray       # (n,) bool


def write_contacts(connection, batch: ContactBatch, replace: bool = False, actor: str = "",
                   reason: str = "") -> WriteCounts:
    """Store ``batch``; the caller holds a write transaction.

    With ``replace``, each stored contact that differs is replaced and its earlier version kept in
    ``contact_versions`` (status superseded, ``reason``, ``actor``), never overwritten. The packed
    contacts of every case the batch touches (:mod:`.case_packs`) are rewritten in the same transaction.
    """
    layout = field_layout(connection)
    n = batch.n_rows
    obs, covs = encode_batch(layout, batch)
    ids = _assign_ids(connection, batch)
    touched_existing = np.unique(ids.row_case[~ids.is_new_case]).tolist()
    duplicates, updates, replaced_details = [], [], []
    if touched_existing:
        connection.execute("CREATE TEMP TABLE IF NOT EXISTS _import_cases (id INTEGER PRIMARY KEY)")
        connection.execute("DELETE FROM _import_cases")
        connection.executemany("INSERT INTO _import_cases (id) VALUES (?)", [(i,) for i in touched_existing])
        duplicates, updates, replaced_details = _compare_with_stored(connection, batch, ids, obs, covs, replace)

    skip = np.zeros(n, dtype=bool)
    skip[duplicates] = True
    skip[[u[0] for u in updates]] = True
    insert_rows = ids.order[~skip[ids.order]]
    last_coordinator = _insert_new_cases(connection, batch, ids)
    _insert_contacts(connection, batch, ids, obs, covs, insert_rows)
    version_ids = _replace_contacts(connection, batch, ids, updates, actor, reason)
    if touched_existing:
        connection.execute(
            "UPDATE cases SET coordinator = COALESCE((SELECT co.code FROM contacts c JOIN coordinators co"
            " ON co.id = c.coordinator_id WHERE c.case_id = cases.id ORDER BY c.day DESC LIMIT 1), '')"
            " WHERE id IN (SELECT id FROM _import_cases)")
        connection.execute("DELETE FROM _import_cases")
    changed_rows = np.concatenate([insert_rows[~ids.is_new_case[insert_rows]],
                                   np.array([i for i, _ in updates], dtype=np.int64)])
    # the packs: new cases from the batch arrays, changed stored cases from their rows
    _write_new_case_packs(connection, batch, ids, obs, covs)
    case_packs.refresh_case_packs(connection, ids.row_case[changed_rows].tolist())
    changed_existing = sorted({str(batch.case_codes[i]) for i in changed_rows.tolist()})
    kept = {"contact_versions": version_ids, "contact_provenance": [f"{int(ids.row_case[i])}:{int(batch.days[i])}"
                                                                    for i, _ in updates]} if updates else {}
    changes = RowChanges(cases=tuple(changed_existing), all_rows=("coordinators",), rows=kept,
                         case_digests=_new_case_digests(batch, ids, last_coordinator, obs, covs))
    return WriteCounts(cases_added=len(ids.new_codes), contacts_added=int(insert_rows.size),
                       duplicates_skipped=len(duplicates), replaced=len(updates), replaced_details=replaced_details,
                       row_changes=changes)


def _assign_ids(connection, batch: ContactBatch) -> _Rows:
    """Stored ids for the batch's coordinators (added when new) and cases (new ids in code order)."""
    import pandas as pd

    # coordinators
    coord_codes, coord_uniques = pd.factorize(batch.coordinators)
    distinct_coordinators = sorted(set(coord_uniques.tolist()) - {""})
    connection.executemany("INSERT OR IGNORE INTO coordinators (code) VALUES (?)",
                           [(c,) for c in distinct_coordinators])
    coordinator_id = {"": None}
    coordinator_code = {None: ""}
    for cid, code in connection.execute("SELECT id, code FROM coordinators"):
        coordinator_id[code] = cid
        coordinator_code[cid] = code

    # cases: existing ids, new ids assigned in code order
    existing = dict((code, cid) for cid, code in connection.execute("SELECT id, case_code FROM cases"))
    case_codes_idx, case_uniques = pd.factorize(batch.case_codes)
    distinct_codes = sorted(case_uniques.tolist())
    new_codes = [c for c in distinct_codes if c not in existing]
    next_id = (max(existing.values()) + 1) if existing else 1
    case_id = dict(existing)
    for offset, code in enumerate(new_codes):
        case_id[code] = next_id + offset
    row_case = np.array([case_id[c] for c in case_uniques.tolist()], dtype=np.int64)[case_codes_idx]
    row_coordinator = np.array([coordinator_id[c] for c in coord_uniques.tolist()] + [None],
                               dtype=object)[:-1][coord_codes]
    return _Rows(row_case=row_case, row_coordinator=row_coordinator, coordinator_code=coordinator_code,
                 case_id=case_id, new_codes=new_codes, next_id=next_id, order=np.lexsort((batch.days, row_case)),
                 is_new_case=row_case >= next_id)


def _compare_with_stored(connection, batch: ContactBatch, ids: _Rows, obs, covs, replace: bool):
    """Stored contacts of existing cases in the batch (listed in ``_import_cases``) against the batch.

    Returns (rows that are exact duplicates, [(row, new stored values)] to replace, replaced details);
    raises :class:`ContactConflicts` for differing rows unless ``replace``.
    """
    duplicates, updates, conflicts, differing, replaced_details = [], [], [], [], []
    stored = {}
    gc_was_enabled = gc.isenabled()
    gc.disable()
    try:
        for key, o, c, st, co, kind in connection.execute(
                "SELECT (c.case_id << 18) + (c.day + 131072), c.observations, c.covariates, c.stage_known,"
                " c.coordinator_id, c.contact_kind FROM contacts c JOIN _import_cases t ON t.id = c.case_id"):
            stored[key] = (o, c, st, co, kind)
    finally:
        if gc_was_enabled:
            gc.enable()
    candidates = np.flatnonzero(~ids.is_new_case)
    kinds = batch.contact_kinds()
    if candidates.size:
        cand_obs, cand_cov = _blobs(obs[candidates]), _blobs(covs[candidates])
        for k, i in enumerate(candidates.tolist()):
            old = stored.get((int(ids.row_case[i]) << 18) + int(batch.days[i]) + 131072)
            if old is None:
                continue
            stage = batch.stage_known[i] or None
            new = (cand_obs[k], cand_cov[k], stage, ids.row_coordinator[i], kinds[i])
            if old == new:
                duplicates.append(i)
                continue
            names = [label for label, a, b in zip(("values", "covariates", "stage_known", "coordinator",
                                                   "contact_kind"), old, new) if a != b]
            if replace:
                updates.append((i, new))
                replaced_details.append({
                    "case_id": str(batch.case_codes[i]), "day": int(batch.days[i]),
                    "old_sha256": _row_digest(old[0], old[1], old[2], ids.coordinator_code.get(old[3], "")),
                    "new_sha256": _row_digest(new[0], new[1], new[2], batch.coordinators[i])})
                if old[4] != new[4]:
                    replaced_details[-1]["contact_kind"] = [old[4], new[4]]
            else:
                conflicts.append(i)
                differing.append(names)
    del stored
    if conflicts:
        raise ContactConflicts(conflicts, differing)
    return duplicates, updates, replaced_details


def _insert_new_cases(connection, batch: ContactBatch, ids: _Rows) -> dict:
    """Insert the new cases with their last recorded coordinator; returns {case id: coordinator}."""
    if not ids.new_codes:
        return {}
    rows_new = ids.order[ids.is_new_case[ids.order]]
    rows_new = rows_new[batch.coordinators[rows_new] != ""]
    # rows are sorted by (case, day): the last row per case wins in the dict
    last_coordinator = dict(zip(ids.row_case[rows_new].tolist(), batch.coordinators[rows_new].tolist()))
    connection.executemany("INSERT INTO cases (id, case_code, coordinator) VALUES (?, ?, ?)",
                           [(ids.case_id[c], c, last_coordinator.get(ids.case_id[c], "")) for c in ids.new_codes])
    return last_coordinator


def _insert_contacts(connection, batch: ContactBatch, ids: _Rows, obs, covs, insert_rows: np.ndarray) -> None:
    """Insert the batch rows ``insert_rows`` (new contacts) into ``contacts``."""
    if not insert_rows.size:
        return
    kinds = None
    if batch.unscheduled is not None and np.any(batch.unscheduled[insert_rows]):
        # contact_kind is named only when some contact is unscheduled (otherwise the column default,
        # 'scheduled', applies), so a batch without kinds is stored exactly as before the column existed
        kinds = batch.contact_kinds()
    kind_column = ", contact_kind" if kinds is not None else ""
    sql = (f"INSERT INTO contacts (case_id, day, observations, covariates, stage_known, coordinator_id{kind_column})"
           f" VALUES (?, ?, ?, ?, ?, ?{', ?' if kind_column else ''})")
    for start in range(0, insert_rows.size, ROWS_PER_STEP):  # Python objects for one step at a time
        rows = insert_rows[start:start + ROWS_PER_STEP]
        columns = [ids.row_case[rows].tolist(), batch.days[rows].tolist(), _blobs(obs[rows]), _blobs(covs[rows]),
                   [s or None for s in batch.stage_known[rows].tolist()], ids.row_coordinator[rows].tolist()]
        if kinds is not None:
            columns.append(kinds[rows].tolist())
        connection.executemany(sql, zip(*columns))
        del columns


def _replace_contacts(connection, batch: ContactBatch, ids: _Rows, updates: list, actor: str, reason: str) -> list:
    """Replace stored contacts by the batch's values, keeping the earlier versions; their ids."""
    if not updates:
        return []
    from .casework_store import keep_earlier_versions

    version_ids = keep_earlier_versions(connection, [(int(ids.row_case[i]), int(batch.days[i])) for i, _ in updates],
                                        "superseded", actor, reason or "replaced by an import")
    connection.executemany(
        "UPDATE contacts SET observations = ?, covariates = ?, stage_known = ?, coordinator_id = ?,"
        " contact_kind = ? WHERE case_id = ? AND day = ?",
        [(o, c, s, co, kind, int(ids.row_case[i]), int(batch.days[i])) for i, (o, c, s, co, kind) in updates])
    return version_ids


def _new_cases_in_steps(ids: _Rows):
    """The new cases in steps of about :data:`ROWS_PER_STEP` contacts: (first case index, last + 1, rows,
    offsets within the step), rows sorted by case (ids in code order), then day."""
    rows = ids.order[ids.is_new_case[ids.order]]
    counts = np.bincount(ids.row_case[rows] - ids.next_id, minlength=len(ids.new_codes))
    offsets = np.concatenate([[0], np.cumsum(counts)])
    first = 0
    while first < len(ids.new_codes):
        last = max(first + 1, int(np.searchsorted(offsets, offsets[first] + ROWS_PER_STEP, side="right")) - 1)
        last = min(last, len(ids.new_codes))
        yield first, last, rows[offsets[first]:offsets[last]], offsets[first:last + 1] - offsets[first]
        first = last


def _write_new_case_packs(connection, batch: ContactBatch, ids: _Rows, obs, covs) -> None:
    """The packs (:mod:`.case_packs`) of the new cases, from the batch arrays (no read-back), step by step."""
    for first, last, rows, offsets in _new_cases_in_steps(ids):
        coordinator_ids = np.array([-1 if c is None else c for c in ids.row_coordinator[rows].tolist()],
                                   dtype=np.int64)
        unscheduled = (np.zeros(rows.size, dtype=bool) if batch.unscheduled is None
                       else np.asarray(batch.unscheduled, dtype=bool)[rows])
        case_packs.write_case_packs(connection, case_packs.pack_rows(
            range(ids.next_id + first, ids.next_id + last), offsets, batch.days[rows], obs[rows], covs[rows],
            coordinator_ids, unscheduled, batch.stage_known[rows]))


def _new_case_digests(batch, ids: _Rows, last_coordinator, obs, covs) -> dict:
    """Digests of the new cases from the batch arrays (no read-back); see :mod:`.row_digests`."""
    out = {}
    for first, last, rows, offsets in _new_cases_in_steps(ids):
        codes = ids.new_codes[first:last]
        digests = case_digests_from_arrays(
            codes, [last_coordinator.get(ids.case_id[c], "") for c in codes], offsets, batch.days[rows],
            obs[rows], covs[rows], batch.stage_known[rows], batch.coordinators[rows],
            None if batch.unscheduled is None else np.asarray(batch.unscheduled, dtype=bool)[rows])
        out.update(zip(codes, digests))
    return out
