"""Contacts on disk: workspace channel/covariate registry, fast loading into ``hmm.Timelines``.

Stored layout (see :mod:`caseview.storage.schema`): one row per contact, observations as one byte
per workspace channel (workspace category code, 255 = blank), covariates as float64 per workspace
covariate. A model's categories are mapped to workspace codes by label, so models that reorder
or add categories keep reading old contacts correctly.
"""

from __future__ import annotations

import gc
from dataclasses import dataclass

import numpy as np

from hmm import MISSING, StageModel, Timelines

from ..errors import WorkspaceError
from .schema import BLANK_CODE, MAX_CATEGORIES_PER_CHANNEL

_NAN_BYTES = np.array([np.nan]).tobytes()  # little-endian float64 NaN on every platform we support
_NATIVE = np.dtype("<f8")


@dataclass(frozen=True)
class FieldLayout:
    """Workspace-wide channel and covariate positions.

    channels : tuple of (name, {label: code}, [labels by code]) in blob position order
    covariates : tuple of names in blob position order
    """

    channels: tuple
    covariates: tuple

    def channel_position(self, name: str) -> int | None:
        for i, (n, _, _) in enumerate(self.channels):
            if n == name:
                return i
        return None

    def covariate_position(self, name: str) -> int | None:
        return self.covariates.index(name) if name in self.covariates else None


def field_layout(connection) -> FieldLayout:
    """The channel/category/covariate registry in two statements (a round trip each on PostgreSQL)."""
    grouped: dict = {}
    for channel_id, name, code, label in connection.execute(
            "SELECT ch.id, ch.name, ca.code, ca.label FROM channels ch LEFT JOIN categories ca "
            "ON ca.channel_id = ch.id ORDER BY ch.position, ca.code"):
        grouped.setdefault(channel_id, (name, []))[1].extend(() if code is None else [(code, label)])
    channels = []
    for name, rows in grouped.values():
        codes = {}
        labels = [""] * (max((r[0] for r in rows), default=-1) + 1)
        for code, label in rows:
            codes[label] = code
            labels[code] = label
        channels.append((name, codes, labels))
    covariates = tuple(r[0] for r in connection.execute("SELECT name FROM covariates ORDER BY position"))
    return FieldLayout(tuple(channels), covariates)


def register_model_fields(connection, model: StageModel) -> None:
    """Add the model's channels, categories and covariates to the workspace registry.

    New channels/covariates widen every stored contact (blank / NaN) and its packed copy
    (:mod:`.case_packs`, rebuilt). Call inside a transaction.
    """
    widened = False
    for channel in model.channels:
        row = connection.execute("SELECT id FROM channels WHERE name = ?", (channel.name,)).fetchone()
        if row is None:
            position = connection.execute("SELECT COALESCE(MAX(position) + 1, 0) FROM channels").fetchone()[0]
            channel_id = connection.execute("INSERT INTO channels (name, position) VALUES (?, ?)",
                                            (channel.name, position)).lastrowid
            connection.execute("UPDATE contacts SET observations = observations || ?", (bytes([BLANK_CODE]),))
            widened = True
        else:
            channel_id = row[0]
        known = {r[0] for r in connection.execute("SELECT label FROM categories WHERE channel_id = ?", (channel_id,))}
        next_code = connection.execute("SELECT COALESCE(MAX(code) + 1, 0) FROM categories WHERE channel_id = ?",
                                       (channel_id,)).fetchone()[0]
        for label in channel.categories:
            if label in known:
                continue
            if next_code >= MAX_CATEGORIES_PER_CHANNEL:
                raise WorkspaceError(f"channel {channel.name!r}: a workspace holds at most "
                                     f"{MAX_CATEGORIES_PER_CHANNEL} different categories per channel")
            connection.execute("INSERT INTO categories (channel_id, code, label) VALUES (?, ?, ?)",
                               (channel_id, next_code, label))
            next_code += 1
    for name in model.covariates:
        if connection.execute("SELECT 1 FROM covariates WHERE name = ?", (name,)).fetchone() is None:
            position = connection.execute("SELECT COALESCE(MAX(position) + 1, 0) FROM covariates").fetchone()[0]
            connection.execute("INSERT INTO covariates (name, position) VALUES (?, ?)", (name, position))
            connection.execute("UPDATE contacts SET covariates = covariates || ?", (_NAN_BYTES,))
            widened = True
    if widened and connection.execute("SELECT 1 FROM contacts LIMIT 1").fetchone() is not None:
        from .case_packs import rebuild_case_packs

        rebuild_case_packs(connection)


@dataclass(frozen=True)
class StoredContacts:
    """All stored contacts, sorted by case code then day (arrays aligned, n contacts, m cases)."""

    case_codes: np.ndarray        # (m,) object, sorted
    case_coordinator: np.ndarray  # (m,) object, last recorded ('' if none) within the selection
    offsets: np.ndarray           # (m + 1,) int64
    days: np.ndarray              # (n,) int64
    observations: np.ndarray      # (n, n_workspace_channels) uint8 workspace codes
    covariates: np.ndarray        # (n, n_workspace_covariates) float64
    stage_known: np.ndarray       # (n,) object ('' = none)
    coordinators: np.ndarray      # (n,) object ('' = blank)
    layout: FieldLayout
    unscheduled: np.ndarray | None = None  # (n,) bool, contact_kind 'unscheduled'


#: Key packing of (case_id, day) into one int64: 18 bits of day (offset so that days before 1970 stay
#: positive), the case id above them.
_DAY_BITS = 18
_DAY_OFFSET = 131072


#: Cases per aggregated read (keeps each aggregated value far below SQLite's 1 GB string limit).
_CASES_PER_READ = 25_000


def _contact_columns_by_case(connection, as_of_day: int | None, ids: list):
    """Fast read: the contacts of a range of cases aggregated into a few values (SQLite ``group_concat``).

    Reading 1.2 million rows one by one costs ~2 s of Python objects (a tuple, two ints, a blob and
    more per contact); aggregating in SQL returns one row per range of ``_CASES_PER_READ`` case ids
    whose text numpy parses in one call. All aggregates of one query see the rows in the same
    order, so the columns stay aligned whatever that order is (the caller sorts). This is the only
    SQLite-specific read: a PostgreSQL backend would use ``string_agg`` here (or
    :func:`_contact_columns_by_row`).

    ``ids`` are the workspace's case ids in increasing order.

    Returns
    -------
    case_ids, days, coordinator_ids : ndarray of int64, shape (n,)
    values : bytes
        The stored observation and covariate bytes of every contact, concatenated in row order.
    """
    if getattr(connection, "kind", "sqlite") == "postgresql":  # the same columns, aggregated by the server
        from .pg_reads import contact_columns

        width = connection.execute("SELECT (SELECT COUNT(*) FROM channels) + 8 * (SELECT COUNT(*) FROM covariates)"
                                   ).fetchone()[0]
        return contact_columns(connection, as_of_day, int(width), ids)
    # (case id, day) packed into one number per contact: one text conversion instead of two
    sql = (f"SELECT COUNT(*), group_concat((case_id << {_DAY_BITS}) + (day + {_DAY_OFFSET})),"
           " CAST(group_concat(observations || covariates, '') AS BLOB), group_concat(COALESCE(coordinator_id, -1))"
           " FROM contacts WHERE case_id > ? AND case_id <= ?")
    if as_of_day is not None:
        sql += " AND day <= ?"
    # ranges (low, high] of at most _CASES_PER_READ cases each
    bounds = [ids[0] - 1] + ids[_CASES_PER_READ - 1::_CASES_PER_READ] if ids else []
    if ids and bounds[-1] != ids[-1]:
        bounds.append(ids[-1])
    parts = []
    for low, high in zip(bounds[:-1], bounds[1:]):
        params = (low, high) + (() if as_of_day is None else (int(as_of_day),))
        count, keys, values, coordinators = connection.execute(sql, params).fetchone()
        if count:
            parts.append((count, keys, values, coordinators))
    n = sum(p[0] for p in parts)
    if not n:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty, b""
    keys = _parse_integers(",".join(p[1] for p in parts), n, "case and day")
    return (keys >> _DAY_BITS, (keys & ((1 << _DAY_BITS) - 1)) - _DAY_OFFSET,
            _parse_integers(",".join(p[3] for p in parts), n, "coordinator"),
            b"".join(p[2] for p in parts))


def _parse_integers(text: str, n: int, what: str) -> np.ndarray:
    values = np.fromstring(text, dtype=np.int64, sep=",") if n else np.zeros(0, dtype=np.int64)
    if values.size != n:
        raise WorkspaceError(f"stored contacts: could not read every {what} ({values.size} of {n}); "
                             "the workspace is damaged - restore a backup")
    return values


def _contact_columns_by_row(connection, as_of_day: int | None, ids: list):
    """Portable read, one row per contact (plain SQL); same result as :func:`_contact_columns_by_case`."""
    sql = ("SELECT case_id, day, CAST(observations || covariates AS BLOB), COALESCE(coordinator_id, -1)"
           " FROM contacts")
    params = ()
    if as_of_day is not None:
        sql += " WHERE day <= ?"
        params = (int(as_of_day),)
    rows = connection.execute(sql, params).fetchall()
    n = len(rows)
    if not n:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty, b""
    case_col, day_col, value_col, coordinator_col = zip(*rows)
    del rows
    return (np.fromiter(case_col, dtype=np.int64, count=n), np.fromiter(day_col, dtype=np.int64, count=n),
            np.fromiter(coordinator_col, dtype=np.int64, count=n), b"".join(value_col))


def _known_stages(connection, as_of_day: int | None):
    """(case_id, day, stage_known) of the few contacts that record a known stage."""
    sql = "SELECT case_id, day, stage_known FROM contacts WHERE stage_known IS NOT NULL AND stage_known <> ''"
    params = ()
    if as_of_day is not None:
        sql += " AND day <= ?"
        params = (int(as_of_day),)
    return connection.execute(sql, params).fetchall()


def _unscheduled_contacts(connection, as_of_day: int | None):
    """(case_id, day) of the contacts recorded as unscheduled (portable SQL)."""
    sql = "SELECT case_id, day FROM contacts WHERE contact_kind = 'unscheduled'"
    params = ()
    if as_of_day is not None:
        sql += " AND day <= ?"
        params = (int(as_of_day),)
    return connection.execute(sql, params).fetchall()


def _rows_of(keys: np.ndarray, pairs: list) -> np.ndarray:
    """Rows of ``keys`` (packed (case, day), one per contact) holding the (case_id, day) ``pairs``."""
    case, day = zip(*pairs)
    wanted = (np.array(case, dtype=np.int64) << _DAY_BITS) + (np.array(day, dtype=np.int64) + _DAY_OFFSET)
    if keys.size > 1 and not np.all(keys[1:] > keys[:-1]):
        by_key = np.argsort(keys, kind="stable")
        return by_key[np.searchsorted(keys, wanted, sorter=by_key)]
    return np.searchsorted(keys, wanted)  # read in (case, day) order already, the usual case


def _row_columns(connection, as_of_day: int | None, ids: list, aggregate: bool):
    """The contact columns through a read of ``contacts`` (see :func:`fetch_contacts`)."""
    n_channels = connection.execute("SELECT COUNT(*) FROM channels").fetchone()[0]
    n_covariates = connection.execute("SELECT COUNT(*) FROM covariates").fetchone()[0]
    read = _contact_columns_by_case if aggregate else _contact_columns_by_row
    case_ids, days, coordinator_ids, value_bytes = read(connection, as_of_day, ids)
    known = _known_stages(connection, as_of_day)
    unscheduled_pairs = _unscheduled_contacts(connection, as_of_day)
    n = case_ids.size
    width = n_channels + 8 * n_covariates
    if len(value_bytes) != n * width:
        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    packed = np.frombuffer(value_bytes, dtype=np.uint8).reshape(n, width)
    keys = (case_ids << _DAY_BITS) + (days + _DAY_OFFSET)
    stage_known = np.full(n, "", dtype=object)
    if known:
        known_case, known_day, known_text = zip(*known)
        stage_known[_rows_of(keys, list(zip(known_case, known_day)))] = np.array(known_text, dtype=object)
    unscheduled = np.zeros(n, dtype=bool)
    if unscheduled_pairs:
        unscheduled[_rows_of(keys, unscheduled_pairs)] = True
    covariates = np.ascontiguousarray(packed[:, n_channels:]).view(_NATIVE).astype(np.float64).reshape(n, n_covariates)
    return case_ids, days, coordinator_ids, packed[:, :n_channels], covariates, unscheduled, stage_known


#: How :func:`fetch_contacts` reads: the per-case packs (default), the per-range aggregate of rows
#: (SQLite ``group_concat``) or one row per contact (the portable reference).
READ_METHODS = ("packed", "aggregate", "row_by_row")


def fetch_contacts(connection, as_of_day: int | None = None, row_by_row: bool = False,
                   method: str = "packed") -> StoredContacts:
    """Read every contact (optionally only days <= ``as_of_day``) into numpy arrays.

    ``method`` (one of :data:`READ_METHODS`): ``"packed"`` reads :mod:`.case_packs` (one row per case,
    kept in step with ``contacts``); ``"aggregate"`` and ``"row_by_row"`` read ``contacts`` itself
    (``row_by_row=True`` is the same as ``method="row_by_row"``). All give the same result.
    """
    from .case_packs import read_case_packs

    if row_by_row:
        method = "row_by_row"
    if method not in READ_METHODS:
        raise ValueError(f"method must be one of {READ_METHODS}, got {method!r}")
    layout = field_layout(connection)
    n_channels, n_covariates = len(layout.channels), len(layout.covariates)
    gc_was_enabled = gc.isenabled()
    gc.disable()  # hundreds of thousands of short-lived tuples would otherwise trigger useless collections
    try:
        cases = connection.execute("SELECT id, case_code FROM cases ORDER BY id").fetchall()
        ids = [c[0] for c in cases]
        if method == "packed":
            columns = read_case_packs(connection, as_of_day, ids)
        else:
            columns = _row_columns(connection, as_of_day, ids, aggregate=method == "aggregate")
    finally:
        if gc_was_enabled:
            gc.enable()
    case_ids, days, coordinator_ids, observations, covariates, unscheduled, stage_known = columns
    if observations.shape[1] != n_channels or covariates.shape[1] != n_covariates:
        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    n = case_ids.size

    coordinator_codes = dict(connection.execute("SELECT id, code FROM coordinators").fetchall())
    code_table = np.array([""] * (max(coordinator_codes, default=0) + 2), dtype=object)
    for k, v in coordinator_codes.items():
        code_table[k] = v

    id_to_code = np.array([""] * (max((c[0] for c in cases), default=0) + 1), dtype=object)
    for k, v in cases:
        id_to_code[k] = v
    if n and case_ids.min() >= 0 and case_ids.max() < max(4 * n, 1024):  # ids are dense: table lookups
        present = np.flatnonzero(np.bincount(case_ids))
        dense = True
    else:
        present, dense = np.unique(case_ids), False
    present_codes = id_to_code[present]
    rank_of_present = np.empty(present.size, dtype=np.int64)
    if present.size > 1 and bool(np.all(present_codes[1:] > present_codes[:-1])):
        code_order = np.arange(present.size)  # ids were given in case-code order (the usual import)
    else:
        code_order = np.argsort(present_codes.astype(str), kind="stable")
    rank_of_present[code_order] = np.arange(present.size)
    if dense:
        rank_of_id = np.zeros(int(case_ids.max()) + 1 if n else 1, dtype=np.int64)
        rank_of_id[present] = rank_of_present
        rank = rank_of_id[case_ids]
    else:
        rank = rank_of_present[np.searchsorted(present, case_ids)]
    # sort by case code, then day: one int64 key (days are unique within a case)
    sort_key = (rank << _DAY_BITS) + (days + _DAY_OFFSET)
    if n > 1 and not np.all(sort_key[1:] > sort_key[:-1]):
        order = np.argsort(sort_key, kind="stable")
        rank, days, observations, covariates = rank[order], days[order], observations[order], covariates[order]
        stage_known, coordinator_ids = stage_known[order], coordinator_ids[order]
        unscheduled = unscheduled[order]
    counts = np.bincount(rank, minlength=present.size)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    coordinators = code_table[coordinator_ids]  # -1 (none recorded) -> the last entry, ''
    # last non-blank coordinator within each case
    row_index = np.where(coordinator_ids >= 0, np.arange(n), -1)
    last = np.maximum.reduceat(row_index, offsets[:-1]) if n else np.zeros(0, dtype=np.int64)
    case_coordinator = np.where(last >= 0, coordinators[np.maximum(last, 0)] if n else last, "").astype(object)
    return StoredContacts(
        case_codes=present_codes[code_order], case_coordinator=case_coordinator, offsets=offsets,
        days=days, observations=observations, covariates=covariates,
        stage_known=stage_known, coordinators=coordinators, layout=layout, unscheduled=unscheduled)


def fetch_case_contacts(connection, case_code: str, as_of_day: int | None = None) -> StoredContacts:
    """One case's current contacts (optionally only days <= ``as_of_day``), read by primary key.

    Same layout as :func:`fetch_contacts` with one case (or none when it has no contacts), the
    contact kinds included (``unscheduled``), so a one-case rescore equals a full one.
    """
    layout = field_layout(connection)
    n_channels, n_covariates = len(layout.channels), len(layout.covariates)
    sql = ("SELECT c.day, c.observations, c.covariates, COALESCE(c.stage_known, ''), COALESCE(co.code, ''),"
           " c.contact_kind FROM contacts c JOIN cases k ON k.id = c.case_id LEFT JOIN coordinators co ON co.id = c.coordinator_id"
           " WHERE k.case_code = ?")
    params = [case_code]
    if as_of_day is not None:
        sql += " AND c.day <= ?"
        params.append(int(as_of_day))
    rows = connection.execute(sql + " ORDER BY c.day", params).fetchall()
    n = len(rows)
    width = n_channels + 8 * n_covariates
    packed = np.frombuffer(b"".join(r[1] + r[2] for r in rows), dtype=np.uint8)
    if packed.size != n * width:
        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    packed = packed.reshape(n, width)
    coordinators = np.array([r[4] for r in rows] + [None], dtype=object)[:-1]
    named = [c for c in coordinators.tolist() if c]
    return StoredContacts(
        case_codes=np.array([case_code] if n else [], dtype=object),
        case_coordinator=np.array([named[-1] if named else ""] if n else [], dtype=object),
        offsets=np.array([0, n] if n else [0], dtype=np.int64),
        days=np.array([r[0] for r in rows], dtype=np.int64),
        observations=packed[:, :n_channels],
        covariates=np.ascontiguousarray(packed[:, n_channels:]).view(_NATIVE).astype(np.float64).reshape(n, n_covariates),
        stage_known=np.array([r[3] for r in rows] + [None], dtype=object)[:-1],
        coordinators=coordinators, layout=layout,
        unscheduled=np.array([r[5] == "unscheduled" for r in rows], dtype=bool))


def observation_codes_for_model(stored: StoredContacts, model: StageModel) -> tuple[np.ndarray, dict]:
    """Model-coded observations (n, n_model_channels) int16 and raw text per model channel."""
    n = stored.days.shape[0]
    observations = np.full((n, len(model.channels)), MISSING, dtype=np.int16)
    raw = {}
    for j, channel in enumerate(model.channels):
        position = stored.layout.channel_position(channel.name)
        if position is None:
            raw[channel.name] = np.full(n, "", dtype=object)
            continue
        _, codes, labels = stored.layout.channels[position]
        lookup = np.full(256, -2, dtype=np.int16)
        lookup[BLANK_CODE] = MISSING
        text = np.full(256, "", dtype=object)
        for code, label in enumerate(labels):
            text[code] = label
            if label in channel.categories:
                lookup[code] = channel.categories.index(label)
        column = stored.observations[:, position]
        coded = lookup[column]
        if np.any(coded == -2):
            bad = np.unique(column[coded == -2])
            names = ", ".join(repr(labels[b]) if b < len(labels) else str(b) for b in bad)
            raise WorkspaceError(f"channel {channel.name!r}: stored contacts use categories {names} that the model "
                                 f"does not have (model categories: {', '.join(channel.categories)})")
        observations[:, j] = coded
        raw[channel.name] = text[column]
    return observations, raw


def covariates_for_model(stored: StoredContacts, model: StageModel) -> np.ndarray:
    n = stored.days.shape[0]
    out = np.zeros((n, len(model.covariates)))
    for k, name in enumerate(model.covariates):
        position = stored.layout.covariate_position(name)
        if position is None:
            if n:
                raise WorkspaceError(f"covariate {name!r} has no recorded values in this workspace; "
                                     "import timelines with that column first")
            continue
        column = stored.covariates[:, position]
        missing = np.isnan(column)
        if missing.any():
            raise WorkspaceError(f"covariate {name!r} is not recorded at {int(missing.sum())} stored contacts "
                                 "(added by a later model); re-import those timelines with the column")
        out[:, k] = column
    return out


def allowed_stages_for_model(stage_known: np.ndarray, model: StageModel) -> np.ndarray:
    n = stage_known.shape[0]
    allowed = np.ones((n, len(model.stages)), dtype=bool)
    if n == 0:
        return allowed
    known = np.flatnonzero(stage_known != "")  # few contacts record a stage; skip the rest cheaply
    if not known.size:
        return allowed
    values, inverse = np.unique(stage_known[known].astype(str), return_inverse=True)
    masks = np.zeros((values.size, len(model.stages)), dtype=bool)
    for i, value in enumerate(values):
        for name in value.split("|"):
            if name not in model.stages:
                raise WorkspaceError(f"stored known stage {name!r} is not a stage of the model "
                                     f"({', '.join(model.stages)})")
            masks[i, model.stages.index(name)] = True
    allowed[known] = masks[inverse.reshape(-1)]
    return allowed


def stored_case_codes(connection) -> list:
    """Every stored case ID, in the order the cases were added (the importer matches new IDs to them)."""
    return [code for (code,) in connection.execute("SELECT case_code FROM cases ORDER BY id")]


def contacts_of_cases_with_stage(connection, stage_names) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every contact of the cases that have a contact recording one of ``stage_names`` alone.

    Used to check records against an earlier (or later) recorded entry into an absorbing stage
    (:func:`caseview.timeline_io.validate.contradictory_contacts`) without reading the whole caseload.
    Inside a write transaction it sees that transaction's rows.

    Returns
    -------
    case_codes : ndarray of object, shape (n,)
    days : ndarray of int64, shape (n,)
    stage_known : ndarray of object, shape (n,)
        '' when none, else 'A|B' in model stage order; rows sorted by case code, then day.
    """
    names = list(stage_names)
    if not names:
        return np.zeros(0, dtype=object), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=object)
    marks = ", ".join("?" * len(names))
    rows = connection.execute(
        "SELECT ca.case_code, c.day, COALESCE(c.stage_known, '') FROM contacts c JOIN cases ca ON ca.id = c.case_id"
        f" WHERE c.case_id IN (SELECT case_id FROM contacts WHERE stage_known IN ({marks}))"
        " ORDER BY ca.case_code, c.day", names).fetchall()
    if not rows:
        return np.zeros(0, dtype=object), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=object)
    codes, days, stages = zip(*rows)
    return np.array(codes, dtype=object), np.array(days, dtype=np.int64), np.array(stages, dtype=object)
