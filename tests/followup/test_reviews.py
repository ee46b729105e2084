"""Review transitions, their audit entries, re-open after a material rise, snapshots and stored rules."""

from __future__ import annotations

import datetime as dt

import pytest

from caseview.errors import InputError
from caseview.followup import assess_caseload, default_rules, record_review, workspace_rules
from caseview.followup.rules import save_workspace_rules
from caseview.storage import followup_store as store
from followup_helpers import BAD, CALM, DEMO_MODEL_PATH, MIXED, write_workspace

EARLY, LATE = dt.date(2026, 8, 1), dt.date(2026, 9, 5)

CASES = [
    # calm, then a bad contact on 2026-09-01: low risk as of EARLY, high as of LATE
    ("HS-0001", "C1", [("2026-06-01", CALM, {}), ("2026-07-20", CALM, {}), ("2026-09-01", BAD, {})]),
    # mixed and stays mixed: in between, small change
    ("HS-0002", "C2", [("2026-06-01", MIXED, {}), ("2026-07-25", MIXED, {}), ("2026-09-01", MIXED, {})]),
    ("HS-0003", "C2", [("2026-06-01", CALM, {})]),
]


@pytest.fixture
def ws(tmp_path, demo_model):
    workspace = write_workspace(tmp_path / "w.cvw", DEMO_MODEL_PATH, demo_model, CASES)
    yield workspace
    workspace.close()


def review_actions(ws, case_id):
    return [e.action for e in ws.audit_entries(case_id=case_id) if e.action.startswith("review.")]


def test_transitions_and_audit(ws):
    before = len(ws.audit_entries())
    with pytest.raises(InputError, match="cannot go from new to actioned; from new the allowed status is acknowledged"):
        record_review(ws, "HS-0001", "actioned", "called", "sup", None, LATE)
    with pytest.raises(InputError, match="cannot go from new to dismissed"):
        record_review(ws, "HS-0001", "dismissed", "fine", "sup", None, LATE)
    with pytest.raises(InputError, match="no case 'HS-0099'"):
        record_review(ws, "HS-0099", "acknowledged", "", "sup", None, LATE)
    with pytest.raises(InputError, match="status must be one of"):
        record_review(ws, "HS-0001", "new", "", "sup", None, LATE)
    assert len(ws.audit_entries()) == before  # refused changes write nothing

    row = record_review(ws, "HS-0001", "acknowledged", "seen it", "sup", None, LATE)
    assert (row.status, row.actor, row.note, row.as_of) == ("acknowledged", "sup", "seen it", LATE.isoformat())
    assert row.at_utc.endswith("Z") and row.p_follow_up is not None
    assert row.flags.split(";")[0] == "in_follow_up_now"  # the bad contact of 2026-09-01
    with pytest.raises(InputError, match="already acknowledged"):
        record_review(ws, "HS-0001", "acknowledged", "again", "sup", None, LATE)
    with pytest.raises(InputError, match="a dismissal needs a reason"):
        record_review(ws, "HS-0001", "dismissed", "   ", "sup", None, LATE)
    row = record_review(ws, "HS-0001", "actioned", "phoned, visit booked", "coord", None, LATE)
    assert row.status == "actioned"
    with pytest.raises(InputError, match="from actioned the allowed status is acknowledged"):
        record_review(ws, "HS-0001", "dismissed", "x", "sup", None, LATE)
    record_review(ws, "HS-0001", "acknowledged", "new worry", "sup", None, LATE)
    record_review(ws, "HS-0001", "dismissed", "family visiting daily", "sup", None, LATE)

    assert review_actions(ws, "HS-0001") == ["review.acknowledged", "review.actioned", "review.acknowledged",
                                             "review.dismissed"]
    entries = [e for e in ws.audit_entries(case_id="HS-0001") if e.action.startswith("review.")]
    history = store.review_rows(ws.connection, "HS-0001", latest_only=False)
    assert [r.audit_id for r in history][::-1] == [e.id for e in entries]  # each row points at its entry
    assert [r.at_utc for r in history][::-1] == [e.at_utc for e in entries]
    assert entries[-1].details["from"] == "acknowledged" and entries[-1].details["note"] == "family visiting daily"
    assert entries[1].actor == "coord"
    assert ws.audit_verify().ok
    # Supervisor view filters.
    assert [r.case_id for r in store.review_rows(ws.connection, status="dismissed")] == ["HS-0001"]
    assert store.review_rows(ws.connection, coordinator="C2") == []


def test_dismissed_flag_reopens_after_material_rise(ws):
    early = assess_caseload(ws, EARLY)
    row = early.scores.row_of("HS-0001")
    low = float(early.scores.p_follow_up_now[row])
    for status, note in (("acknowledged", "looked"), ("dismissed", "calm on the phone")):
        record_review(ws, "HS-0001", status, note, "sup", early)
        record_review(ws, "HS-0002", status, note, "sup", early)
    # An assessment as of an earlier date than the dismissal never re-opens.
    assert assess_caseload(ws, dt.date(2026, 7, 1)).reopened == ()
    late = assess_caseload(ws, LATE)
    high = float(late.scores.p_follow_up_now[late.scores.row_of("HS-0001")])
    assert high - low >= 0.15  # the construction: the bad contact raises it materially
    rise_2 = late.scores.p_follow_up_now[late.scores.row_of("HS-0002")] - \
        early.scores.p_follow_up_now[early.scores.row_of("HS-0002")]
    assert rise_2 < 0.15
    assert late.reopened == ("HS-0001",)
    assert late.review_status[late.scores.row_of("HS-0001")] == "new"
    assert late.reviewed_by[late.scores.row_of("HS-0001")] == "caseview"
    assert late.review_status[late.scores.row_of("HS-0002")] == "dismissed"
    entry = ws.audit_entries(case_id="HS-0001")[-1]
    assert (entry.action, entry.actor) == ("review.reopened", "caseview")
    assert entry.details["p_follow_up_at_dismissal"] == pytest.approx(low)
    assert entry.details["p_follow_up_now"] == pytest.approx(high)
    # Re-opened means a person can acknowledge it again; a second assessment does not re-open twice.
    assert assess_caseload(ws, LATE).reopened == ()
    record_review(ws, "HS-0001", "acknowledged", "on it", "sup", late)
    assert ws.audit_verify().ok


def test_snapshot_feeds_sharp_rise(ws):
    first = assess_caseload(ws, EARLY, save_snapshot=True, actor="sup")
    assert first.saved_run_id is not None and first.previous_as_of is None
    second = assess_caseload(ws, LATE)
    assert second.previous_as_of == EARLY
    row = second.scores.row_of("HS-0001")
    rise = second.scores.p_follow_up_now[row] - first.scores.p_follow_up_now[first.scores.row_of("HS-0001")]
    assert rise >= 0.2
    assert "sharp_rise" in second.flags[row].split(";")
    reason = next(r for r in second.reasons[row] if r.rule == "sharp_rise")
    assert reason.value == pytest.approx(rise) and EARLY.isoformat() in reason.message
    assert "sharp_rise" not in second.flags[second.scores.row_of("HS-0003")]
    snapshot = [e for e in ws.audit_entries() if e.action == "scores.snapshot"]
    assert len(snapshot) == 1 and snapshot[0].details["as_of"] == EARLY.isoformat()
    # A run saved at the same as-of date is not "previous" for that date.
    assert assess_caseload(ws, EARLY).previous_as_of is None


def test_rules_stored_in_workspace(ws):
    assert workspace_rules(ws) == default_rules()
    changed = default_rules().with_changes(["in_follow_up_now.threshold=0.3", "sharp_rise.enabled=false"])
    save_workspace_rules(ws, changed, "sup")
    assert workspace_rules(ws) == changed
    entry = ws.audit_entries()[-1]
    assert entry.action == "setting.change" and entry.actor == "sup"
    a = assess_caseload(ws, LATE)
    assert a.rules["in_follow_up_now"].threshold == 0.3


def test_a_review_made_meanwhile_by_someone_else_is_named_and_nothing_is_stored(ws, tmp_path, monkeypatch):
    """Two people review the same flag at once: the first is stored, the second is told who changed it."""
    import caseview.followup.reviews as reviews
    from caseview.storage import Workspace

    real_numbers = reviews._case_numbers

    def colleague_reviews_meanwhile(workspace, case_id, assessment, as_of):
        numbers = real_numbers(workspace, case_id, assessment, as_of)  # between the first read and the write
        if workspace is ws:
            with Workspace.open(ws.path) as other:
                record_review(other, case_id, "acknowledged", "seen", "kim", None, LATE)
        return numbers

    monkeypatch.setattr(reviews, "_case_numbers", colleague_reviews_meanwhile)
    before = len(ws.audit_entries())
    with pytest.raises(InputError, match=r"^review of HS-0001: changed by kim a moment ago \(now acknowledged\); "
                                         r"nothing was stored"):
        record_review(ws, "HS-0001", "acknowledged", "looking", "sup", None, LATE)
    assert len(ws.audit_entries()) == before + 1  # kim's review only
    assert store.latest_reviews(ws.connection, "HS-0001")["HS-0001"].actor == "kim"
