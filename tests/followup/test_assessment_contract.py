"""CaseloadAssessment says what it is (issue 14 item 2): not declared frozen while it is filled in
place; its fields carry real types; a recorded review reaches it through the application function
(record_review), not through a view writing into its arrays."""

from __future__ import annotations

import dataclasses
import datetime as dt

import pytest

from caseview.followup import assess_caseload, record_review
from caseview.followup.assess import CaseloadAssessment
from followup_helpers import BAD, CALM, DEMO_MODEL_PATH, write_workspace

AS_OF = dt.date(2026, 9, 5)
CASES = [("HS-0001", "C1", [("2026-06-01", CALM, {}), ("2026-07-20", CALM, {}), ("2026-09-01", BAD, {})]),
         ("HS-0002", "C2", [("2026-06-01", CALM, {})])]


@pytest.fixture
def ws(tmp_path, demo_model):
    workspace = write_workspace(tmp_path / "w.cvw", DEMO_MODEL_PATH, demo_model, CASES)
    yield workspace
    workspace.close()


def test_not_declared_frozen_because_reasons_are_filled_in_place():
    assert not CaseloadAssessment.__dataclass_params__.frozen


def test_no_field_is_typed_object_or_optional_where_it_is_always_there():
    annotations = {f.name: str(f.type) for f in dataclasses.fields(CaseloadAssessment)}
    assert "object" not in annotations.values()
    for always in ("review_note", "explained", "evaluation", "reasons"):
        assert "None" not in annotations[always], always


def test_recording_a_review_updates_the_assessment_given(ws):
    a = assess_caseload(ws, AS_OF, reopen=False, explain_reasons=False)
    r = a.scores.row_of("HS-0001")
    assert a.is_flagged[r] and a.review_status[r] == "new"
    stored = record_review(ws, "HS-0001", "acknowledged", "visit booked", "sup", a)
    assert (a.review_status[r], a.reviewed_by[r], a.reviewed_at[r], a.review_note[r]) == \
        ("acknowledged", "sup", stored.at_utc, "visit booked")
    other = a.scores.row_of("HS-0002")
    assert a.review_status[other] == ("new" if a.is_flagged[other] else "")
