"""Case work jobs (record, correct, void, contacts, close, reopen) on the invented demo caseload."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.operations import casework
from caseview.storage import Workspace


@pytest.fixture
def ws(tmp_path):
    from caseview.cli.basic import create_demo_workspace

    path = tmp_path / "demo.cvw"
    create_demo_workspace(path, "tester")
    workspace = Workspace.open(path)
    yield workspace
    workspace.close()


def _snapshot(ws):
    con = ws.connection
    return [con.execute(f"SELECT COUNT(*) FROM {t}").fetchone()[0]
            for t in ("cases", "contacts", "contact_versions", "contact_provenance", "case_closures", "audit_log")]


def test_record_carries_covariates_over_and_is_audited(ws):
    last = casework.list_contacts(ws, "HS-0002")[-1]
    result = casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"mobility": "slow"})
    assert result.carried_over == ("lives_alone", "balance_programme")
    stored = casework.list_contacts(ws, "HS-0002")[-1]
    assert stored.date == "2026-12-01" and stored.values["mobility"] == "slow" and stored.values["falls"] == ""
    assert stored.covariates == last.covariates
    assert stored.recorded_by == "ann" and stored.status == "current"
    assert abs(sum(result.estimate.p_now.values()) - 1.0) < 1e-9
    entry = ws.audit_entries()[-1]
    assert entry.action == "contact.record" and entry.details["old"] is None
    assert entry.details["new"]["values"]["mobility"] == "slow"
    assert ws.audit_verify().ok


def test_recorded_estimate_matches_scoring_the_whole_caseload(ws):
    from caseview.scoring import score_caseload

    result = casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"concern": "serious"})
    scores = score_caseload(ws, dt.date(2026, 12, 1))
    row = scores.row_of("HS-0002")
    assert np.allclose(list(result.estimate.p_now.values()), scores.p_now[row], atol=1e-12)


def test_new_case_needs_coordinator_and_covariates(ws):
    before = _snapshot(ws)
    with pytest.raises(InputError, match="coordinator"):
        casework.record_contact(ws, "HS-9001", "2026-12-01", "ann")
    with pytest.raises(InputError, match="lives_alone"):
        casework.record_contact(ws, "HS-9001", "2026-12-01", "ann", coordinator="C2")
    assert _snapshot(ws) == before
    result = casework.add_case(ws, "HS-9001", "C2", "2026-12-01", "ann",
                               covariates={"lives_alone": 1, "balance_programme": 0})
    assert result.case_created and ws.case_count() == before[0] + 1
    with pytest.raises(InputError, match="already exists"):
        casework.add_case(ws, "HS-9001", "C2", "2026-12-02", "ann", covariates={"lives_alone": 1,
                                                                                "balance_programme": 0})


@pytest.mark.parametrize("kwargs, fragment", [
    ({"date": "2026-02-30"}, "not a calendar date"),
    ({"date": "2026-12-01", "values": {"mobility": "fast"}}, "unknown category"),
    ({"date": "2026-12-01", "values": {"speed": "slow"}}, "unknown channel"),
    ({"date": "2026-12-01", "covariates": {"lives_alone": "yes"}}, "expected a finite number"),
    ({"date": "2026-12-01", "stage_known": "Asleep"}, "unknown stage"),
    ({"date": "2026-09-02"}, "already has a contact"),
])
def test_bad_input_is_one_line_and_stores_nothing(ws, kwargs, fragment):
    before = _snapshot(ws)
    with pytest.raises(InputError, match=fragment) as caught:
        casework.record_contact(ws, "HS-0002", actor="ann", **kwargs)
    assert "\n" not in str(caught.value)
    assert _snapshot(ws) == before


def test_identifier_screen_and_formula_guard_as_import(ws):
    before = _snapshot(ws)
    with pytest.raises(InputError, match="identifier") as caught:
        casework.record_contact(ws, "jo.bloggs@example.org", "2026-12-01", "ann", coordinator="C1",
                                covariates={"lives_alone": 0, "balance_programme": 0})
    assert "jo.bloggs" not in str(caught.value)  # the screen masks what it found
    with pytest.raises(InputError, match="formula"):
        casework.record_contact(ws, "=HS-1", "2026-12-01", "ann", coordinator="C1",
                                covariates={"lives_alone": 0, "balance_programme": 0})
    assert _snapshot(ws) == before


def test_contact_after_a_recorded_move_is_refused(ws):
    # HS-0003's last contact records the move to residential care (a stage with no way out)
    assert "consider closing" in casework.closing_suggestion(ws, "HS-0003")
    before = _snapshot(ws)
    with pytest.raises(InputError, match="no later contacts unless they record that stage"):
        casework.record_contact(ws, "HS-0003", "2026-12-01", "ann", values={"mobility": "slow"})
    assert _snapshot(ws) == before


def test_correct_keeps_the_earlier_version_and_scoring_uses_the_new(ws):
    from caseview.scoring import score_caseload

    casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"falls": "several"})
    change = casework.correct_contact(ws, "HS-0002", "2026-12-01", "falls were one", "bo",
                                      values={"falls": "one"}, new_date="2026-12-02")
    assert change.details["old"]["values"]["falls"] == "several"
    assert change.details["new"]["values"]["falls"] == "one" and change.details["new"]["date"] == "2026-12-02"
    current = casework.list_contacts(ws, "HS-0002")
    assert [v.date for v in current][-1] == "2026-12-02" and "2026-12-01" not in [v.date for v in current]
    every = casework.list_contacts(ws, "HS-0002", all_versions=True)
    old = [v for v in every if v.status == "superseded"]
    assert len(old) == 1 and old[0].values["falls"] == "several" and old[0].reason == "falls were one"
    assert old[0].recorded_by == "ann" and old[0].ended_by == "bo"
    # scoring sees only the current version
    scores = score_caseload(ws, dt.date(2026, 12, 5))
    row = scores.row_of("HS-0002")
    assert scores.last_contact_day[row] == (dt.date(2026, 12, 2) - dt.date(1970, 1, 1)).days
    assert ws.audit_entries()[-1].action == "contact.correct" and ws.audit_verify().ok


def test_correct_that_changes_nothing_or_lacks_reason_is_refused(ws):
    before = _snapshot(ws)
    with pytest.raises(InputError, match="changes nothing"):
        casework.correct_contact(ws, "HS-0002", "2026-09-02", "no change", "bo")
    with pytest.raises(InputError, match="reason is required"):
        casework.correct_contact(ws, "HS-0002", "2026-09-02", "  ", "bo", values={"falls": "one"})
    with pytest.raises(InputError, match="identifier rule phone") as caught:
        casework.void_contact(ws, "HS-0002", "2026-09-02", "daughter rang from 0207 946 0123", "bo")
    assert "0207" not in str(caught.value)
    with pytest.raises(InputError, match="no current contact on 2026-11-17"):
        casework.void_contact(ws, "HS-0002", "2026-11-17", "never happened", "bo")
    assert _snapshot(ws) == before


def test_void_keeps_the_version_and_leaves_scoring(ws):
    n_before = len(casework.list_contacts(ws, "HS-0002"))
    change = casework.void_contact(ws, "HS-0002", "2026-09-02", "recorded under the wrong case", "bo")
    assert change.details["old"]["date"] == "2026-09-02" and change.details["new"] is None
    assert len(casework.list_contacts(ws, "HS-0002")) == n_before - 1
    voided = [v for v in casework.list_contacts(ws, "HS-0002", all_versions=True) if v.status == "voided"]
    assert len(voided) == 1 and voided[0].reason == "recorded under the wrong case"
    stored = ws.stored_contacts()
    assert stored.days.size == ws.contact_count()
    # stored versions cannot be edited or deleted
    import sqlite3

    with pytest.raises(sqlite3.DatabaseError, match="kept as recorded"):
        ws.connection.execute("DELETE FROM contact_versions")
    assert ws.audit_verify().ok


def test_import_replace_keeps_the_replaced_version(ws, tmp_path):
    from caseview.timeline_io import import_timelines

    path = tmp_path / "fix.csv"
    path.write_text("case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme,stage_known\n"
                    "HS-0002,2026-09-02,C2,unable,none,none,1,1,\n", encoding="utf-8")
    import_timelines(ws, path, actor="ann", replace=True)
    every = casework.list_contacts(ws, "HS-0002", all_versions=True)
    old = [v for v in every if v.status == "superseded"]
    assert len(old) == 1 and old[0].date == "2026-09-02" and "fix.csv" in old[0].reason


def test_close_and_reopen_decide_what_is_scored(ws):
    from caseview.scoring import score_caseload

    casework.close_case(ws, "HS-0002", "2026-11-20", "moved", "ann")
    assert "HS-0002" not in score_caseload(ws, dt.date(2026, 11, 30)).case_ids
    assert "HS-0002" in score_caseload(ws, dt.date(2026, 11, 19)).case_ids  # still open then
    assert "HS-0002" in score_caseload(ws, dt.date(2026, 11, 30), include_closed=True).case_ids
    mask = ws.open_case_mask(["HS-0002", "HS-0003"], None)
    assert mask.tolist() == [False, True]
    with pytest.raises(InputError, match="is closed since 2026-11-20"):
        casework.record_contact(ws, "HS-0002", "2026-11-25", "ann")
    with pytest.raises(InputError, match="already closed"):
        casework.close_case(ws, "HS-0002", "2026-11-21", "moved", "ann")
    casework.reopen_case(ws, "HS-0002", "ann")
    assert "HS-0002" in score_caseload(ws, dt.date(2026, 11, 30)).case_ids
    with pytest.raises(InputError, match="not closed"):
        casework.reopen_case(ws, "HS-0002", "ann")
    with pytest.raises(InputError, match="before its latest contact"):
        casework.close_case(ws, "HS-0002", "2026-01-01", "moved", "ann")
    with pytest.raises(InputError, match="expected one of moved"):
        casework.close_case(ws, "HS-0002", "2026-12-01", "bored", "ann")
    assert [e.action for e in ws.audit_entries()[-2:]] == ["case.close", "case.reopen"]
    assert ws.audit_verify().ok


@pytest.mark.parametrize("change", ["replace", "insert", "remove"])
def test_rescoring_one_case_equals_rescoring_all(ws, change):
    """The spliced caseload equals a full rescore, whatever happened to the case."""
    from caseview.followup import assess_caseload
    from caseview.gui.data_source import LoadedCaseload

    as_of = dt.date(2026, 12, 5)
    a = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    loaded = LoadedCaseload(a.scores, a)
    if change == "replace":
        casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"concern": "serious"})
        case = "HS-0002"
    elif change == "insert":
        casework.add_case(ws, "HS-0002b", "C2", "2026-12-01", "ann", values={"falls": "several"},
                          covariates={"lives_alone": 1, "balance_programme": 0})
        case = "HS-0002b"
    else:
        casework.close_case(ws, "HS-0002", "2026-12-01", "moved", "ann")
        case = "HS-0002"
    spliced, row = casework.rescore_case(ws, loaded, case)
    full = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    s, f = spliced.scores, full.scores
    assert s.case_ids.tolist() == f.case_ids.tolist()
    assert (row == -1) == (change == "remove") and (row < 0 or s.case_ids[row] == case)
    for name in ("p_now", "p_reach", "p_follow_up_now", "last_contact_day", "n_contacts", "last_covariates"):
        assert np.allclose(getattr(s, name), getattr(f, name), atol=1e-12), name
    assert np.array_equal(s.timelines.offsets, f.timelines.offsets)
    assert np.array_equal(s.timelines.observations, f.timelines.observations)
    assert spliced.assessment.flags.tolist() == full.flags.tolist()
    assert np.allclose(spliced.assessment.priority, full.priority)
    assert spliced.assessment.evaluation.fired.shape == full.evaluation.fired.shape


def test_successive_one_case_rescores_reuse_buffers_and_stay_exact(ws):
    """Several changes in a row (the window's buffers gain spare rows, then rows move within them)."""
    from caseview.followup import assess_caseload
    from caseview.gui.data_source import LoadedCaseload

    as_of = dt.date(2026, 12, 5)
    a = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    loaded = LoadedCaseload(a.scores, a)
    steps = [lambda: casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"falls": "one"}),
             lambda: casework.record_contact(ws, "HS-0004", "2026-12-02", "ann", values={"falls": "several"}),
             lambda: casework.void_contact(ws, "HS-0002", "2026-09-02", "never happened", "ann"),
             lambda: casework.record_contact(ws, "HS-0002", "2026-12-03", "ann", values={"concern": "serious"})]
    cases = ["HS-0002", "HS-0004", "HS-0002", "HS-0002"]
    for step, case in zip(steps, cases):
        step()
        loaded, _ = casework.rescore_case(ws, loaded, case)
    full = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    assert loaded.scores.timelines.offsets[-1] == full.scores.timelines.n_contacts
    assert np.array_equal(loaded.scores.timelines.times, full.scores.timelines.times)
    assert np.array_equal(loaded.scores.timelines.observations, full.scores.timelines.observations)
    assert np.array_equal(loaded.scores.caseload.contact_days, full.scores.caseload.contact_days)
    for name, column in full.scores.caseload.raw_values.items():
        assert loaded.scores.caseload.raw_values[name].tolist() == column.tolist()
    assert np.allclose(loaded.scores.p_now, full.scores.p_now, atol=1e-12)
    assert loaded.assessment.flags.tolist() == full.flags.tolist()


def test_row_digests_catch_versions_and_closures_changed_outside_caseview(ws):
    """Every case-work write names its rows for the audit trail's row digests (the safety hook)."""
    casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"falls": "several"})
    casework.correct_contact(ws, "HS-0002", "2026-12-01", "one fall", "bo", values={"falls": "one"})
    casework.close_case(ws, "HS-0002", "2026-12-02", "moved", "bo")
    assert ws.audit_verify().ok
    con = ws.connection
    con.execute("DROP TRIGGER contact_versions_no_update")
    con.execute("UPDATE contact_versions SET reason = 'rewritten'")
    result = ws.audit_verify()
    assert not result.ok and "contact_versions" in result.problem
    con.execute("UPDATE contact_versions SET reason = 'one fall'")
    assert ws.audit_verify().ok
    con.execute("UPDATE case_closures SET reason = 'died'")
    result = ws.audit_verify()
    assert not result.ok and "case_closures" in result.problem


def _kinds(ws, code):
    return {v.date: v.contact_kind for v in casework.list_contacts(ws, code, all_versions=True)}


def test_record_and_correct_carry_the_contact_kind(ws):
    """record stores the kind (default scheduled); correct changes it or keeps it; versions keep the old one."""
    casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"falls": "one"}, contact_kind="unscheduled")
    casework.record_contact(ws, "HS-0002", "2026-12-03", "ann", values={"falls": "none"})
    current = {v.date: v.contact_kind for v in casework.list_contacts(ws, "HS-0002")}
    assert current["2026-12-01"] == "unscheduled" and current["2026-12-03"] == "scheduled"
    stored = ws.stored_contacts()
    day = int(np.datetime64("2026-12-01", "D").astype(int))
    assert stored.unscheduled[(stored.case_codes.repeat(np.diff(stored.offsets)) == "HS-0002") & (stored.days == day)].all()
    casework.correct_contact(ws, "HS-0002", "2026-12-01", "was planned", "bo", contact_kind="scheduled")
    casework.correct_contact(ws, "HS-0002", "2026-12-01", "one fall more", "bo", values={"falls": "several"})
    versions = [v for v in casework.list_contacts(ws, "HS-0002", all_versions=True) if v.date == "2026-12-01"]
    assert [(v.status, v.contact_kind) for v in versions] == [("current", "scheduled"), ("superseded", "scheduled"),
                                                              ("superseded", "unscheduled")]
    with pytest.raises(InputError, match="contact kind 'sometimes'"):
        casework.record_contact(ws, "HS-0002", "2026-12-04", "ann", contact_kind="sometimes")
    assert ws.audit_verify().ok


def test_one_case_rescore_equals_full_rescore_with_unscheduled_contacts(ws):
    """The demo model has an unscheduled_contacts block: the one-case read must carry the kinds."""
    from caseview.followup import assess_caseload
    from caseview.gui.data_source import LoadedCaseload

    assert ws.current_model()[0].unscheduled_contacts is not None
    as_of = dt.date(2026, 12, 5)
    a = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    loaded = LoadedCaseload(a.scores, a)
    casework.record_contact(ws, "HS-0002", "2026-12-01", "ann", values={"falls": "one"}, contact_kind="unscheduled")
    spliced, _ = casework.rescore_case(ws, loaded, "HS-0002")
    full = assess_caseload(ws, as_of, 90.0, reopen=False, explain_reasons=False)
    assert full.scores.timelines.unscheduled is not None and full.scores.timelines.unscheduled.any()
    assert np.array_equal(spliced.scores.timelines.unscheduled_mask, full.scores.timelines.unscheduled_mask)
    for name in ("p_now", "p_reach", "p_follow_up_now"):
        assert np.allclose(getattr(spliced.scores, name), getattr(full.scores, name), atol=1e-12), name


def test_contact_after_recorded_absorbing_entry_uses_the_import_wording(ws, tmp_path):
    """record and import refuse a contact after a recorded exact entry into a stage with no way out alike."""
    import csv

    from caseview.timeline_io import import_timelines

    before = _snapshot(ws)
    with pytest.raises(InputError) as recorded:
        casework.record_contact(ws, "HS-0003", "2026-12-01", "ann", values={"mobility": "slow"})
    assert _snapshot(ws) == before
    model, _ = ws.current_model()
    header = ["case_id", "date", "coordinator", *[c.name for c in model.channels], *model.covariates, "stage_known"]
    path = tmp_path / "late.csv"
    with path.open("w", newline="", encoding="utf-8") as f:
        csv.writer(f).writerows([header, ["HS-0003", "2026-12-01", "", "slow", *[""] * (len(model.channels) - 1),
                                          *["0"] * len(model.covariates), ""]])
    with pytest.raises(InputError) as imported:
        import_timelines(ws, path, "ann")
    core = "comes after the recorded entry into absorbing stage 'Moved to residential care' on "
    assert core in str(recorded.value) and core in str(imported.value)
    tail = "; a case that has entered it has no later contacts unless they record that stage"
    assert tail in str(recorded.value) and tail in str(imported.value)
    assert _snapshot(ws) == before


@pytest.mark.parametrize("kind", ["float", "float_rows", "bool_rows", "int16_rows", "object"])
def test_splicing_contact_rows_moves_the_shorter_side_and_equals_concatenation(kind, rng):
    """Random replacements, insertions and removals of one case's rows, reusing the buffer both ways."""
    from caseview.operations import single_case
    from caseview.operations.single_case import _Splice

    def rows(count):
        if kind == "float":
            return rng.random(count)
        if kind == "object":
            return np.array([str(v) for v in rng.integers(0, 9, count)], dtype=object)
        dtype = {"float_rows": float, "bool_rows": bool, "int16_rows": np.int16}[kind]
        return (rng.random((count, 3)) * 9).astype(dtype)

    counts = list(rng.integers(0, 6, 40))
    data = rows(int(sum(counts)))
    expected = data.copy()
    old_base = None
    for _ in range(60):
        offsets = np.concatenate([[0], np.cumsum(counts)])
        case = int(rng.integers(0, len(counts) + 1))
        change = rng.choice(["replace", "insert", "remove"]) if case < len(counts) else "insert"
        present, keep = change != "insert", change != "remove"
        new = rows(int(rng.integers(1, 6))) if keep else None
        a = int(offsets[case])
        b = int(offsets[case + 1]) if present else a
        expected = np.concatenate([expected[:a]] + ([new] if keep else []) + [expected[b:]])
        data = _Splice(case, present, keep).per_contact(data, new, offsets)
        assert data.shape == expected.shape and (data == expected).all()
        if present:
            counts = counts[:case] + ([len(new)] if keep else []) + counts[case + 1:]
        else:
            counts = counts[:case] + [len(new)] + counts[case:]
        old_base = data.base if old_base is None else old_base
    assert data.base is old_base  # after the first allocation, rows only moved within the buffer
    assert single_case.SPARE_ROWS >= 100


def test_splicing_never_writes_into_a_buffer_it_did_not_allocate(rng):
    """Two arrays that are views of one bigger array: a splice of one must not touch the other."""
    from caseview.operations.single_case import _Splice

    shared = np.arange(40.0)
    first, second = shared[:20], shared[20:]
    kept = second.copy()
    offsets = np.array([0, 5, 10, 20])
    spliced = _Splice(0, True, True).per_contact(first, np.array([-1.0] * 8), offsets)   # grows by three rows
    assert np.array_equal(second, kept) and spliced[:8].tolist() == [-1.0] * 8
    assert spliced[8:].tolist() == list(np.arange(5.0, 20.0))
