"""The packed contacts of each case: one row per case, its contacts as column blobs.

``contacts`` (one row per contact) is the record. ``case_packs`` holds the same current contacts
once more, one row per case, so that a whole caseload reaches the engine at close to memory speed:
reading 100,000 rows of a few blobs and joining them costs a fraction of reading 1.2 million contact
rows (see the performance section of the README). One case with ``n`` contacts is one row:

* ``contacts``: a BLOB of ``n`` fixed-width records in day order (:func:`record_dtype`): day
  (little-endian int32, days since 1970-01-01), coordinator id (int32, ``coordinators.id``, -1 = none),
  unscheduled (one byte, 1 when ``contact_kind`` is 'unscheduled'), the stored observation bytes
  (one per workspace channel) and the stored covariates (little-endian float64 each), so the
  blobs of many cases joined together are read with one ``numpy.frombuffer``;
* ``stage_known``: NULL when no contact records a known stage, else a JSON list of ``n`` texts.

The widths (``n_channels``, ``n_covariates``) are stored with each pack, so a pack written for
another layout is refused instead of misread. A case without current contacts has no pack.

Kept in step: every function that writes ``contacts`` rewrites the packs of the cases it touched in
the same transaction (:func:`write_case_packs` from arrays it already holds, or
:func:`refresh_case_packs` from the rows), and a change of the channel/covariate registry rebuilds
all of them (:func:`rebuild_case_packs`), so a committed workspace never has a pack that disagrees
with its rows. :func:`check_case_packs` proves it (``caseview check``). Plain portable SQL only.
"""

from __future__ import annotations

import json

import numpy as np

#: Cases per read or rebuild step (bounds the memory of a million-case rebuild).
CASES_PER_STEP = 25_000
#: At most this many ``?`` in one ``IN (...)`` list.
_IDS_PER_QUERY = 500

_INSERT = ("INSERT INTO case_packs (case_id, n_contacts, n_channels, n_covariates, contacts, stage_known)"
           " VALUES (?, ?, ?, ?, ?, ?)")
# CAST: a contact widened with ``||`` (a new channel or covariate) holds text-typed bytes
_ROWS = ("SELECT case_id, day, CAST(observations AS BLOB), CAST(covariates AS BLOB), COALESCE(coordinator_id, -1),"
         " contact_kind, COALESCE(stage_known, '') FROM contacts")


def record_dtype(n_channels: int, n_covariates: int) -> np.dtype:
    """The packed record of one contact (no padding; see the module docstring)."""
    return np.dtype([("day", "<i4"), ("coordinator", "<i4"), ("unscheduled", "u1"),
                     ("observations", "u1", (n_channels,)), ("covariates", "<f8", (n_covariates,))])


def _layout_widths(connection) -> tuple[int, int]:
    row = connection.execute("SELECT (SELECT COUNT(*) FROM channels), (SELECT COUNT(*) FROM covariates)").fetchone()
    return int(row[0]), int(row[1])


def pack_rows(case_ids, offsets, days, observations, covariates, coordinator_ids, unscheduled, stage_known) -> list:
    """Parameter tuples for ``case_packs`` from aligned per-contact arrays.

    Parameters
    ----------
    case_ids : sequence of int, length m
    offsets : ndarray of int64, shape (m + 1,)
        Contacts of case ``i`` are rows ``offsets[i]:offsets[i + 1]``, in day order.
    days : ndarray of int, shape (n,)
    observations : ndarray of uint8, shape (n, n_channels)
    covariates : ndarray of float64, shape (n, n_covariates)
    coordinator_ids : ndarray of int, shape (n,)   -1 = none
    unscheduled : ndarray of bool, shape (n,)
    stage_known : ndarray of object, shape (n,)    '' = none

    Returns
    -------
    list of tuple, one per case with at least one contact
    """
    offsets = np.asarray(offsets, dtype=np.int64)
    n_channels, n_covariates = observations.shape[1], covariates.shape[1]
    records = np.zeros(len(days), dtype=record_dtype(n_channels, n_covariates))
    records["day"] = days
    records["coordinator"] = coordinator_ids
    records["unscheduled"] = unscheduled
    records["observations"] = observations
    records["covariates"] = covariates
    data, width = records.tobytes(), records.dtype.itemsize
    stage_known = np.asarray(stage_known, dtype=object)
    with_stage = np.zeros(len(case_ids), dtype=bool)
    known_rows = np.flatnonzero(stage_known != "")
    if known_rows.size:
        with_stage[np.searchsorted(offsets, known_rows, side="right") - 1] = True
    out = []
    starts, ends = offsets[:-1].tolist(), offsets[1:].tolist()
    for i, (case_id, a, b) in enumerate(zip(case_ids, starts, ends)):
        if b == a:
            continue
        stages = json.dumps(stage_known[a:b].tolist()) if with_stage[i] else None
        out.append((int(case_id), b - a, n_channels, n_covariates, data[width * a:width * b], stages))
    return out


def write_case_packs(connection, rows: list) -> None:
    """Replace the packs of the cases in ``rows`` (from :func:`pack_rows`); the caller holds the transaction."""
    _delete_packs(connection, [r[0] for r in rows])
    connection.executemany(_INSERT, rows)


def _delete_packs(connection, case_ids) -> None:
    ids = [int(i) for i in case_ids]
    for start in range(0, len(ids), _IDS_PER_QUERY):
        chunk = ids[start:start + _IDS_PER_QUERY]
        connection.execute(f"DELETE FROM case_packs WHERE case_id IN ({', '.join('?' * len(chunk))})", chunk)


def _packs_from_rows(rows, n_channels: int, n_covariates: int) -> list:
    """Pack tuples from contact rows of :data:`_ROWS` (any order)."""
    if not rows:
        return []
    rows = sorted(rows, key=lambda r: (r[0], r[1]))
    case_col, day_col, obs_col, cov_col, coordinator_col, kind_col, stage_col = zip(*rows)
    n = len(rows)
    case_ids = np.array(case_col, dtype=np.int64)
    starts = np.flatnonzero(np.concatenate([[True], case_ids[1:] != case_ids[:-1]]))
    observations = np.frombuffer(b"".join(obs_col), dtype=np.uint8)
    covariates = np.frombuffer(b"".join(cov_col), dtype="<f8")
    if observations.size != n * n_channels or covariates.size != n * n_covariates:
        from ..errors import WorkspaceError

        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    return pack_rows(case_ids[starts].tolist(), np.append(starts, n), np.array(day_col, dtype=np.int64),
                     observations.reshape(n, n_channels), covariates.reshape(n, n_covariates),
                     np.array(coordinator_col, dtype=np.int64), np.array(kind_col, dtype=object) == "unscheduled",
                     np.array(stage_col, dtype=object))


def refresh_case_packs(connection, case_ids) -> None:
    """Rewrite the packs of ``case_ids`` (stored ids) from their current rows in ``contacts``.

    Call inside the transaction that changed those rows, after changing them.
    """
    ids = sorted({int(i) for i in case_ids})
    if not ids:
        return
    n_channels, n_covariates = _layout_widths(connection)
    for start in range(0, len(ids), _IDS_PER_QUERY):
        chunk = ids[start:start + _IDS_PER_QUERY]
        rows = connection.execute(f"{_ROWS} WHERE case_id IN ({', '.join('?' * len(chunk))})", chunk).fetchall()
        _delete_packs(connection, chunk)
        connection.executemany(_INSERT, _packs_from_rows(rows, n_channels, n_covariates))


def _id_ranges(connection, ids=None):
    """Ranges (low, high] of at most :data:`CASES_PER_STEP` stored case ids (``ids``: all of them, increasing)."""
    if ids is None:
        ids = [row[0] for row in connection.execute("SELECT id FROM cases ORDER BY id")]
    if not ids:
        return []
    bounds = [ids[0] - 1] + ids[CASES_PER_STEP - 1::CASES_PER_STEP]
    if bounds[-1] != ids[-1]:
        bounds.append(ids[-1])
    return list(zip(bounds[:-1], bounds[1:]))


def rebuild_case_packs(connection) -> None:
    """Rebuild every pack from ``contacts`` (a migration, or a new channel or covariate widened every row)."""
    connection.execute("DELETE FROM case_packs")
    n_channels, n_covariates = _layout_widths(connection)
    for low, high in _id_ranges(connection):
        rows = connection.execute(f"{_ROWS} WHERE case_id > ? AND case_id <= ?", (low, high)).fetchall()
        connection.executemany(_INSERT, _packs_from_rows(rows, n_channels, n_covariates))


def check_case_packs(connection) -> tuple[int, str]:
    """Compare every pack with the rows it stands for.

    Returns
    -------
    n_cases : int
        Cases compared.
    problem : str
        '' when every pack equals its rows, else one line naming the first case that differs.
    """
    n_channels, n_covariates = _layout_widths(connection)
    codes = dict(connection.execute("SELECT id, case_code FROM cases").fetchall())
    n_cases = 0
    for low, high in _id_ranges(connection):
        rows = connection.execute(f"{_ROWS} WHERE case_id > ? AND case_id <= ?", (low, high)).fetchall()
        expected = {r[0]: r[1:] for r in _packs_from_rows(rows, n_channels, n_covariates)}
        stored = {r[0]: tuple(bytes(v) if isinstance(v, (bytes, memoryview)) else v for v in r[1:])
                  for r in connection.execute(
                      "SELECT case_id, n_contacts, n_channels, n_covariates, contacts, stage_known FROM case_packs"
                      " WHERE case_id > ? AND case_id <= ?",
                      (low, high))}
        n_cases += len(set(expected) | set(stored))
        for case_id in sorted(set(expected) | set(stored)):
            if expected.get(case_id) != stored.get(case_id):
                what = "has no packed contacts" if case_id not in stored else (
                    "has packed contacts but no stored contacts" if case_id not in expected
                    else "packed contacts differ from its stored contacts")
                return n_cases, f"case {codes.get(case_id, case_id)} {what}"
    orphans = connection.execute("SELECT COUNT(*) FROM case_packs WHERE case_id NOT IN (SELECT id FROM cases)"
                                 ).fetchone()[0]
    if orphans:
        return n_cases, f"{orphans} packed case(s) belong to no stored case"
    return n_cases, ""


def read_case_packs(connection, as_of_day: int | None = None, ids=None):
    """Every case's packed contacts as flat arrays (cases in stored-id order, days increasing within).

    ``ids``: the stored case ids in increasing order, when the caller has read them already.

    Returns
    -------
    case_ids, days, coordinator_ids : ndarray of int64, shape (n,)
    observations : ndarray of uint8, shape (n, n_channels)
    covariates : ndarray of float64, shape (n, n_covariates)
    unscheduled : ndarray of bool, shape (n,)
    stage_known : ndarray of object, shape (n,)
        '' = none, else the known stage(s) as stored.
    """
    from ..errors import WorkspaceError

    n_channels, n_covariates = _layout_widths(connection)
    dtype = record_dtype(n_channels, n_covariates)
    case_parts, data_parts, known_rows, known_texts, n = [], [], [], [], 0
    for low, high in _id_ranges(connection, ids):
        rows = connection.execute("SELECT case_id, n_contacts, contacts, stage_known FROM case_packs"
                                  " WHERE case_id > ? AND case_id <= ? ORDER BY case_id", (low, high)).fetchall()
        if not rows:
            continue
        case_ids, data, rows_of_texts, texts = _unpack(rows, dtype, WorkspaceError)
        del rows
        case_parts.append(case_ids)
        data_parts.append(data)
        known_rows.append(rows_of_texts + n)
        known_texts += texts
        n += case_ids.size
    # one buffer, one frombuffer, one copy per field (joining the parts' arrays instead costs more)
    records = np.frombuffer(b"".join(data_parts), dtype=dtype)
    del data_parts
    case_ids = np.concatenate(case_parts) if case_parts else np.zeros(0, dtype=np.int64)
    days = records["day"].astype(np.int64)
    keep = None if as_of_day is None else days <= int(as_of_day)
    if keep is not None and keep.all():
        keep = None
    if keep is not None:
        records, case_ids, days = records[keep], case_ids[keep], days[keep]
    stage_known = np.full(records.size, "", dtype=object)
    if known_texts:
        rows = np.concatenate(known_rows)
        texts = np.array(known_texts + [None], dtype=object)[:-1]
        if keep is not None:
            texts, rows = texts[keep[rows]], (np.cumsum(keep) - 1)[rows[keep[rows]]]
        stage_known[rows] = texts
    return (case_ids, days, records["coordinator"].astype(np.int64),
            np.ascontiguousarray(records["observations"]).reshape(records.size, n_channels),
            records["covariates"].astype(np.float64).reshape(records.size, n_covariates),
            records["unscheduled"].astype(bool), stage_known)


def _unpack(rows, dtype: np.dtype, error):
    """From rows (case_id, n_contacts, contacts, stage_known) in case-id order: the case id of each contact,
    the joined records, and the rows (within these rows) and texts of the known stages."""
    case_col, count_col, record_col, stage_col = zip(*rows)
    counts = np.array(count_col, dtype=np.int64)
    data = b"".join(record_col)
    if len(data) != int(counts.sum()) * dtype.itemsize:
        raise error("packed contacts do not match the workspace's channel/covariate registry; "
                    "the workspace is damaged - restore a backup")
    with_stage = [i for i, text in enumerate(stage_col) if text is not None]
    texts, rows_of_texts = [], np.zeros(0, dtype=np.int64)
    if with_stage:  # one JSON parse for all of them: the lists joined into one
        every = json.loads("[" + ",".join(stage_col[i][1:-1] for i in with_stage) + "]")
        starts = np.concatenate([[0], np.cumsum(counts)[:-1]])[with_stage]
        sizes = counts[with_stage]
        rows_of_texts = np.repeat(starts - np.concatenate([[0], np.cumsum(sizes)[:-1]]), sizes) + np.arange(sizes.sum())
        if len(every) != rows_of_texts.size:
            raise error("packed known stages are damaged; restore a backup")
        named = [i for i, text in enumerate(every) if text]
        texts, rows_of_texts = [every[i] for i in named], rows_of_texts[named]
    return np.repeat(np.array(case_col, dtype=np.int64), counts), data, rows_of_texts, texts
