"""Processes that use one PostgreSQL team workspace at once (tests/storage/test_team_concurrency.py).

Each function runs in its own process (``multiprocessing``, spawn) as one login and puts one tuple per
attempted write on the queue: ``(login, key, "ok")`` or ``(login, key, "fail: message")``.
"""

from __future__ import annotations

COVARIATES = {"lives_alone": 1, "balance_programme": 0}
SHARED_NEW_CASE = "HS-7999"  # two coordinators of C1 both try to add this person on the same day


def new_case_code(who: int, i: int) -> str:
    return f"HS-7{who}{i:02d}"


def coordinator(url: str, password: str, who: int, coordinator_code: str, cases: int, start, queue) -> None:
    """Add ``cases`` people (a first contact each), then a second contact for each; and try the shared case."""
    from caseview.errors import CaseviewError
    from caseview.operations import casework
    from caseview.storage import Workspace

    with Workspace.open(url, password=password) as ws:
        start.wait(60)
        writes = [(new_case_code(who, i), "2026-10-01", True) for i in range(cases)]
        writes += [(SHARED_NEW_CASE, "2026-10-02", True)] if coordinator_code == "C1" else []
        writes += [(new_case_code(who, i), "2026-10-15", False) for i in range(cases)]
        for code, date, new in writes:
            try:
                casework.record_contact(ws, code, date, "ignored", values={"mobility": "slow", "falls": "none"},
                                        covariates=COVARIATES if new else None,
                                        coordinator=coordinator_code if new else None, new_case=new)
                queue.put((ws.connection.execute("SELECT session_user").fetchone()[0], f"{code}@{date}", "ok"))
            except CaseviewError as exc:
                queue.put((str(who), f"{code}@{date}", f"fail: {exc}"))


def supervisor(url: str, password: str, case_codes, as_of: str, start, queue) -> None:
    """Acknowledge every case of ``case_codes`` (another supervisor does the same at the same time)."""
    import datetime as dt

    from caseview.errors import CaseviewError
    from caseview.followup import record_review
    from caseview.storage import Workspace

    with Workspace.open(url, password=password) as ws:
        login = ws.connection.execute("SELECT session_user").fetchone()[0]
        start.wait(60)
        for code in case_codes:
            try:
                record_review(ws, code, "acknowledged", "seen at the team meeting", "ignored", None,
                              dt.date.fromisoformat(as_of))
                queue.put((login, code, "ok"))
            except CaseviewError as exc:
                queue.put((login, code, f"fail: {exc}"))


def analyst(url: str, password: str, versions: int, start, queue) -> None:
    """Publish ``versions`` model versions (the current model again, as after a refit) while others write."""
    from caseview.errors import CaseviewError
    from caseview.storage import Workspace

    with Workspace.open(url, password=password) as ws:
        login = ws.connection.execute("SELECT session_user").fetchone()[0]
        text = ws.current_model()[1].json_text
        start.wait(60)
        for k in range(versions):
            try:
                ws.add_model_version(text, f"republished {k}", "ignored")
                queue.put((login, f"model {k}", "ok"))
            except CaseviewError as exc:
                queue.put((login, f"model {k}", f"fail: {exc}"))
