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
    channels = []
    for channel_id, name in connection.execute("SELECT id, name FROM channels ORDER BY position"):
        codes = {}
        labels = [""] * 0
        rows = connection.execute("SELECT code, label FROM categories WHERE channel_id = ? ORDER BY code",
                                  (channel_id,)).fetchall()
        labels = [""] * (max((r[0] for r in rows), default=-1) + 1)
        for code, label in rows:
            codes[label] = code
            labels[code] = label
        channels.append((name, codes, labels))
    covariates = tuple(r[0] for r in connection.execute("SELECT name FROM covariates ORDER BY position"))
    return FieldLayout(tuple(channels), covariates)


def register_model_fields(connection, model: StageModel) -> None:
    """Add the model's channels, categories and covariates to the workspace registry.

    New channels/covariates widen every stored contact (blank / NaN). Call inside a transaction.
    """
    for channel in model.channels:
        row = connection.execute("SELECT id FROM channels WHERE name = ?", (channel.name,)).fetchone()
        if row is None:
            position = connection.execute("SELECT COALESCE(MAX(position) + 1, 0) FROM channels").fetchone()[0]
            channel_id = connection.execute("INSERT INTO channels (name, position) VALUES (?, ?)",
                                            (channel.name, position)).lastrowid
            connection.execute("UPDATE contacts SET observations = observations || ?", (bytes([BLANK_CODE]),))
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


def fetch_contacts(connection, as_of_day: int | None = None) -> StoredContacts:
    """Read every contact (optionally only days <= ``as_of_day``) into numpy arrays."""
    layout = field_layout(connection)
    n_channels, n_covariates = len(layout.channels), len(layout.covariates)
    # one packed key per row (case id and day) and one concatenated blob keep the number of Python
    # objects per row small; CAST(... AS BLOB) keeps the bytes exactly as stored
    sql = ("SELECT (case_id << 18) + (day + 131072), CAST(observations || covariates AS BLOB), stage_known,"
           " coordinator_id FROM contacts")
    params = ()
    if as_of_day is not None:
        sql += " WHERE day <= ?"
        params = (int(as_of_day),)
    gc_was_enabled = gc.isenabled()
    gc.disable()  # millions of short-lived tuples would otherwise trigger many useless collections
    try:
        rows = connection.execute(sql, params).fetchall()
        n = len(rows)
        if n:
            key_col, value_col, stage_col, coord_col = zip(*rows)
        else:
            key_col = value_col = stage_col = coord_col = ()
        del rows
    finally:
        if gc_was_enabled:
            gc.enable()
    keys = np.fromiter(key_col, dtype=np.int64, count=n)
    case_ids = keys >> 18
    days = (keys & ((1 << 18) - 1)) - 131072
    width = n_channels + 8 * n_covariates
    value_bytes = b"".join(value_col)
    del key_col, value_col
    if len(value_bytes) != n * width:
        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    packed = np.frombuffer(value_bytes, dtype=np.uint8).reshape(n, width)
    observations = packed[:, :n_channels]
    covariates = np.ascontiguousarray(packed[:, n_channels:]).view(_NATIVE).astype(np.float64).reshape(n, n_covariates)
    stage_known = np.array(stage_col, dtype=object) if n else np.zeros(0, dtype=object)
    stage_known[np.equal(stage_known, None)] = ""
    coordinator_ids = np.array(coord_col, dtype=object) if n else np.zeros(0, dtype=object)
    coordinator_ids[np.equal(coordinator_ids, None)] = -1
    coordinator_ids = coordinator_ids.astype(np.int64)

    coordinator_codes = dict(connection.execute("SELECT id, code FROM coordinators").fetchall())
    code_table = np.array([""] * (max(coordinator_codes, default=0) + 2), dtype=object)
    for k, v in coordinator_codes.items():
        code_table[k] = v
    coordinators = code_table[coordinator_ids]  # -1 -> last entry, ''

    cases = connection.execute("SELECT id, case_code FROM cases").fetchall()
    id_to_code = np.array([""] * (max((c[0] for c in cases), default=0) + 1), dtype=object)
    for k, v in cases:
        id_to_code[k] = v
    present = np.unique(case_ids)
    present_codes = id_to_code[present]
    rank_of_present = np.empty(present.size, dtype=np.int64)
    code_order = np.argsort(present_codes.astype(str), kind="stable")
    rank_of_present[code_order] = np.arange(present.size)
    rank = rank_of_present[np.searchsorted(present, case_ids)]
    order = np.lexsort((days, rank))
    rank = rank[order]
    counts = np.bincount(rank, minlength=present.size)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    coordinators = coordinators[order]
    # last non-blank coordinator within each case
    row_index = np.where(coordinators != "", np.arange(n), -1)
    last = np.maximum.reduceat(row_index, offsets[:-1]) if n else np.zeros(0, dtype=np.int64)
    case_coordinator = np.where(last >= 0, coordinators[np.maximum(last, 0)] if n else last, "").astype(object)
    return StoredContacts(
        case_codes=present_codes[code_order], case_coordinator=case_coordinator, offsets=offsets,
        days=days[order], observations=observations[order], covariates=covariates[order],
        stage_known=stage_known[order], coordinators=coordinators, layout=layout)


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
    values, inverse = np.unique(stage_known.astype(str), return_inverse=True)
    masks = np.ones((values.size, len(model.stages)), dtype=bool)
    for i, value in enumerate(values):
        if value == "":
            continue
        masks[i] = False
        for name in value.split("|"):
            if name not in model.stages:
                raise WorkspaceError(f"stored known stage {name!r} is not a stage of the model "
                                     f"({', '.join(model.stages)})")
            masks[i, model.stages.index(name)] = True
    return masks[inverse]
