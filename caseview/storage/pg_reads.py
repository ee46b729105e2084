"""The fast read of every contact on PostgreSQL: one binary ``COPY ... TO STDOUT`` parsed by numpy.

The counterpart of SQLite's ``group_concat`` read in :mod:`caseview.storage.contacts` (same
result; tested identical). Every row of the copy has the same width (case id, day and coordinator
id as int8; the stored observation and covariate bytes, whose width is fixed by the workspace's
channel and covariate registry), so the stream is one numpy structured array.

Binary copy format: PostgreSQL documentation, "COPY", section "Binary Format" (an 11-byte
signature, a 32-bit flags field and a 32-bit header-extension length; per row a 16-bit field count,
then for each field a 32-bit length and the value in network byte order; a 16-bit -1 trailer).
"""

from __future__ import annotations

import numpy as np

from ..errors import WorkspaceError

_SIGNATURE = b"PGCOPY\n\xff\r\n\x00"
_HEADER = len(_SIGNATURE) + 8


def _damaged(what: str) -> WorkspaceError:
    return WorkspaceError(f"stored contacts: {what}; the workspace is damaged - restore a backup")


def contact_columns(connection, as_of_day: int | None, width: int):
    """(case_ids, days, coordinator_ids, value bytes) of every contact (optionally days <= ``as_of_day``).

    Parameters
    ----------
    connection : caseview.storage.pg_connection.PgConnection
    width : int
        Bytes of observations plus covariates per contact (n_channels + 8 * n_covariates).

    Returns
    -------
    case_ids, days, coordinator_ids : ndarray of int64, shape (n,)
    values : bytes, length n * width
    """
    sql = "SELECT case_id, day, observations || covariates, COALESCE(coordinator_id, -1) FROM contacts"
    params = ()
    if as_of_day is not None:
        sql += " WHERE day <= ?"
        params = (int(as_of_day),)
    data = connection.copy_out(sql, params)
    if len(data) < _HEADER + 2 or not data.startswith(_SIGNATURE):
        raise _damaged("the server's copy stream is not in the expected format")
    extension = int.from_bytes(data[len(_SIGNATURE) + 4:_HEADER], "big")
    body = memoryview(data)[_HEADER + extension:len(data) - 2]
    record = np.dtype([("fields", ">i2"), ("case_length", ">i4"), ("case_id", ">i8"), ("day_length", ">i4"),
                       ("day", ">i8"), ("value_length", ">i4"), ("values", "u1", (width,)),
                       ("coordinator_length", ">i4"), ("coordinator_id", ">i8")])
    if len(body) % record.itemsize:
        raise _damaged("a contact's stored values do not match the channel and covariate registry")
    rows = np.frombuffer(body, dtype=record)
    if rows.size and not (np.all(rows["fields"] == 4) and np.all(rows["value_length"] == width)
                          and np.all(rows["case_length"] == 8) and np.all(rows["coordinator_length"] == 8)):
        raise _damaged("a contact's stored values do not match the channel and covariate registry")
    return (rows["case_id"].astype(np.int64), rows["day"].astype(np.int64), rows["coordinator_id"].astype(np.int64),
            np.ascontiguousarray(rows["values"]).tobytes())
