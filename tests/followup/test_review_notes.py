"""Review notes and names (issue 12 items 6 and 7): one line of plain text, screened for identifiers,
and listed with control characters escaped so a stored note can never forge a line."""

from __future__ import annotations

import datetime as dt

import pytest

from caseview.cli.main import main
from caseview.errors import InputError
from caseview.followup import record_review
from caseview.storage import followup_store as store
from followup_helpers import BAD, CALM, DEMO_MODEL_PATH, write_workspace

LATE = dt.date(2026, 9, 5)
CASES = [("HS-0001", "C1", [("2026-06-01", CALM, {}), ("2026-09-01", BAD, {})]),
         ("HS-0002", "C2", [("2026-06-01", CALM, {})])]


@pytest.fixture
def ws(tmp_path, demo_model):
    workspace = write_workspace(tmp_path / "w.cvw", DEMO_MODEL_PATH, demo_model, CASES)
    yield workspace
    workspace.close()


@pytest.mark.parametrize("note", ["called\nHS-0002 acknowledged by ann", "tab\there", "bidi \u202e override"])
def test_note_with_control_characters_is_refused(ws, note):
    before = len(ws.audit_entries())
    with pytest.raises(InputError, match="control character"):
        record_review(ws, "HS-0001", "acknowledged", note, "sup", None, LATE)
    assert len(ws.audit_entries()) == before


def test_actor_with_control_characters_is_refused(ws):
    with pytest.raises(InputError, match="control character"):
        record_review(ws, "HS-0001", "acknowledged", "seen", "sup\nadmin", None, LATE)


@pytest.mark.parametrize("note,rule", [("rang her on 07700 900123", "phone"), ("Mrs Jones says fine", "person_name"),
                                       ("lives at 12 Elm Street now", "street_address"),
                                       ("born 12/03/1948", "date_of_birth")])
def test_note_that_looks_like_an_identifier_is_refused_without_echo(ws, note, rule):
    before = len(ws.audit_entries())
    with pytest.raises(InputError) as info:
        record_review(ws, "HS-0001", "acknowledged", note, "sup", None, LATE)
    message = str(info.value)
    assert f"identifier rule {rule}" in message and note not in message
    for word in note.split():
        if any(c.isdigit() for c in word) or word[0].isupper():
            assert word not in message.split(": ", 1)[1].replace("review of HS-0001", "")
    assert len(ws.audit_entries()) == before


def test_plain_note_is_kept(ws):
    row = record_review(ws, "HS-0001", "acknowledged", "  called, all fine for now  ", "sup", None, LATE)
    assert row.note == "called, all fine for now"


def test_reviews_listing_escapes_stored_control_characters(ws, tmp_path, capsys):
    with ws.transaction():
        store.insert_review(ws.connection, "HS-0002", "acknowledged", "ok\n  HS-0001      C1     dismissed",
                            "ann\tx", "2026-09-05T10:00:00Z", "", None, None, None)
    path = str(ws.path)
    ws.close()
    capsys.readouterr()
    assert main(["reviews", path]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == "1 reviewed cases" and len(lines) == 2
    assert "ok\\n  HS-0001" in lines[1] and "ann\\tx" in lines[1]


def test_cli_note_with_a_phone_number_is_a_one_line_error(ws, capsys):
    path = str(ws.path)
    ws.close()
    code = main(["review", path, "HS-0001", "--status", "acknowledged", "--note", "ring 07700 900123",
                 "--as-of", "2026-09-05"])
    err = capsys.readouterr().err
    assert code == 2 and "07700" not in err and len(err.strip().splitlines()) == 1
