"""SQL for follow-up: reviews, score-run snapshots and their per-case scores.

Every function takes the workspace's sqlite3 connection (``ws.connection``) and neither opens nor
commits a transaction: callers wrap writes in ``ws.transaction()`` together with the audit entry,
so a review and its audit entry are stored together or not at all.
"""

from __future__ import annotations

from dataclasses import dataclass

_REVIEW_COLUMNS = ("r.id, c.case_code, c.coordinator, r.status, r.note, r.actor, r.at_utc, r.flags, "
                   "r.p_follow_up, r.as_of, r.audit_id")


@dataclass(frozen=True)
class ReviewRow:
    """One stored review change."""

    id: int
    case_id: str
    coordinator: str
    status: str
    note: str
    actor: str
    at_utc: str
    flags: str
    p_follow_up: float | None
    as_of: str | None
    audit_id: int | None


def case_keys(connection, case_codes) -> dict:
    """Map case codes to the ``cases.id`` keys (codes not in the workspace are left out)."""
    codes = list(dict.fromkeys(str(c) for c in case_codes))
    found = {}
    for start in range(0, len(codes), 500):
        chunk = codes[start:start + 500]
        marks = ",".join("?" * len(chunk))
        found.update(connection.execute(
            f"SELECT case_code, id FROM cases WHERE case_code IN ({marks})", chunk).fetchall())
    return found


def case_exists(connection, case_code: str) -> bool:
    return connection.execute("SELECT 1 FROM cases WHERE case_code = ?", (case_code,)).fetchone() is not None


def latest_reviews(connection, case_code: str | None = None) -> dict:
    """The most recent review of every reviewed case: case code -> :class:`ReviewRow`."""
    where, params = "", ()
    if case_code is not None:
        where, params = "AND c.case_code = ?", (case_code,)
    rows = connection.execute(
        f"SELECT {_REVIEW_COLUMNS} FROM reviews r JOIN cases c ON c.id = r.case_id "
        f"WHERE r.id = (SELECT MAX(id) FROM reviews WHERE case_id = r.case_id) {where} ORDER BY c.case_code",
        params).fetchall()
    return {row[1]: ReviewRow(*row) for row in rows}


def review_rows(connection, case_code: str | None = None, status: str | None = None,
                coordinator: str | None = None, latest_only: bool = True) -> list:
    """Reviews for the supervisor view, newest first within each case; filters are exact matches."""
    clauses, params = [], []
    if latest_only:
        clauses.append("r.id = (SELECT MAX(id) FROM reviews WHERE case_id = r.case_id)")
    if case_code is not None:
        clauses.append("c.case_code = ?")
        params.append(case_code)
    if status is not None:
        clauses.append("r.status = ?")
        params.append(status)
    if coordinator is not None:
        clauses.append("c.coordinator = ?")
        params.append(coordinator)
    where = ("WHERE " + " AND ".join(clauses)) if clauses else ""
    rows = connection.execute(
        f"SELECT {_REVIEW_COLUMNS} FROM reviews r JOIN cases c ON c.id = r.case_id {where} "
        f"ORDER BY c.case_code, r.id DESC", params).fetchall()
    return [ReviewRow(*row) for row in rows]


def insert_review(connection, case_code: str, status: str, note: str, actor: str, at_utc: str,
                  flags: str, p_follow_up: float | None, as_of: str | None, audit_id: int | None) -> int:
    """Store one review change; returns its id. The case must exist.

    ``audit_id`` may name the entry appended right after this row in the same transaction (the entry
    records the row's digest), so the foreign key is checked at commit.
    """
    connection.execute("PRAGMA defer_foreign_keys = ON")
    cursor = connection.execute(
        "INSERT INTO reviews (case_id, status, note, actor, at_utc, flags, p_follow_up, as_of, audit_id) "
        "SELECT id, ?, ?, ?, ?, ?, ?, ?, ? FROM cases WHERE case_code = ?",
        (status, note, actor, at_utc, flags, p_follow_up, as_of, audit_id, case_code))
    if cursor.rowcount != 1:
        raise KeyError(case_code)
    return int(cursor.lastrowid)


def save_score_run(connection, as_of: str, horizon_days: float, model_version: int | None, created_utc: str,
                   case_codes, p_follow_up_now, p_reach_follow_up, flags) -> int:
    """Store a score-run snapshot and one row per case; returns the run id."""
    cursor = connection.execute(
        "INSERT INTO score_runs (as_of, horizon_days, model_version, created_utc) VALUES (?, ?, ?, ?)",
        (as_of, float(horizon_days), model_version, created_utc))
    run_id = int(cursor.lastrowid)
    keys = case_keys(connection, case_codes)
    connection.executemany(
        "INSERT INTO case_scores (run_id, case_id, p_follow_up_now, p_reach_follow_up, flags) VALUES (?, ?, ?, ?, ?)",
        ((run_id, keys[str(code)], float(now), float(reach), str(flag))
         for code, now, reach, flag in zip(case_codes, p_follow_up_now, p_reach_follow_up, flags)
         if str(code) in keys))
    return run_id


def previous_run(connection, before_as_of: str):
    """The most recent saved run with an as-of date strictly before ``before_as_of``.

    Returns
    -------
    (run_id, as_of, {case code: p_follow_up_now}) or None
    """
    row = connection.execute(
        "SELECT id, as_of FROM score_runs WHERE as_of < ? ORDER BY as_of DESC, id DESC LIMIT 1",
        (before_as_of,)).fetchone()
    if row is None:
        return None
    scores = dict(connection.execute(
        "SELECT c.case_code, s.p_follow_up_now FROM case_scores s JOIN cases c ON c.id = s.case_id "
        "WHERE s.run_id = ?", (row[0],)).fetchall())
    return int(row[0]), row[1], scores


def score_runs(connection) -> list:
    """All saved runs: (id, as_of, horizon_days, model_version, created_utc, n_cases), newest first."""
    return connection.execute(
        "SELECT r.id, r.as_of, r.horizon_days, r.model_version, r.created_utc, "
        "(SELECT COUNT(*) FROM case_scores s WHERE s.run_id = r.id) FROM score_runs r "
        "ORDER BY r.as_of DESC, r.id DESC").fetchall()
