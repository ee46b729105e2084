"""The fast read of every contact on PostgreSQL: fixed-width binary records aggregated by the server.

The counterpart of SQLite's ``group_concat`` read in :mod:`caseview.storage.contacts` (same
result; tested identical). The server packs each contact into one fixed-width record (case id, day
and coordinator id as big-endian int8 through ``int8send``, then the stored observation and
covariate bytes, whose width is fixed by the workspace's channel and covariate registry) and
``string_agg`` joins the records of a range of cases into one ``bytea`` value, fetched in binary
(no text escaping), so 1.2 million contacts arrive as a few values that numpy reads as one
structured array. Each record carries all its fields, so the order of the records does not matter
(the caller sorts).
"""

from __future__ import annotations

import numpy as np

from ..errors import WorkspaceError

#: Cases per aggregated value (far below PostgreSQL's 1 GB limit on one value).
CASES_PER_READ = 25_000


def contact_columns(connection, as_of_day: int | None, width: int, ids: list):
    """(case_ids, days, coordinator_ids, value bytes) of every contact (optionally days <= ``as_of_day``).

    Parameters
    ----------
    connection : caseview.storage.pg_connection.PgConnection
    width : int
        Bytes of observations plus covariates per contact (n_channels + 8 * n_covariates).
    ids : list of int
        The workspace's case ids in increasing order (the reads go by ranges of them).

    Returns
    -------
    case_ids, days, coordinator_ids : ndarray of int64, shape (n,)
    values : bytes, length n * width
    """
    sql = ("SELECT COUNT(*), string_agg(int8send(case_id) || int8send(day) || int8send(COALESCE(coordinator_id, -1))"
           " || observations || covariates, ''::bytea) FROM contacts WHERE case_id > %s AND case_id <= %s")
    if as_of_day is not None:
        sql += " AND day <= %s"
    bounds = [ids[0] - 1] + ids[CASES_PER_READ - 1::CASES_PER_READ] if ids else []
    if ids and bounds[-1] != ids[-1]:
        bounds.append(ids[-1])
    import psycopg

    from .pg_connection import as_sqlite_error

    parts, n = [], 0
    try:
        with connection.raw.cursor(binary=True) as cursor:
            for low, high in zip(bounds[:-1], bounds[1:]):
                params = (int(low), int(high)) + (() if as_of_day is None else (int(as_of_day),))
                count, packed = cursor.execute(sql, params).fetchone()
                if count:
                    parts.append(packed)
                    n += int(count)
    except psycopg.Error as exc:
        raise as_sqlite_error(exc) from exc
    record = np.dtype([("case_id", ">i8"), ("day", ">i8"), ("coordinator_id", ">i8"), ("values", "u1", (width,))])
    data = b"".join(parts)
    if len(data) != n * record.itemsize:
        raise WorkspaceError("stored contacts do not match the workspace's channel/covariate registry; "
                             "the workspace is damaged - restore a backup")
    rows = np.frombuffer(data, dtype=record)
    return (rows["case_id"].astype(np.int64), rows["day"].astype(np.int64), rows["coordinator_id"].astype(np.int64),
            np.ascontiguousarray(rows["values"]).tobytes())
