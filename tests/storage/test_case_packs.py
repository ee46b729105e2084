"""The packed contacts (one row per case, issue 19) stay exactly in step with the contact rows after every write.

After each write path the packs must equal packs built afresh from the rows (``check_case_packs``), and the
caseload read from the packs must equal the portable row-by-row read, field by field.
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest

from caseview.cli.main import main
from caseview.errors import InputError
from caseview.storage import Workspace, schema
from caseview.storage.case_packs import check_case_packs
from caseview.storage.contacts import READ_METHODS, fetch_contacts
from caseview.timeline_io import import_timelines
from storage_helpers import ROWS, as_caseview_before_case_packs, generated_rows, write_csv
from test_contact_reading import assert_same_contacts


def assert_in_step(ws, expected_cases: int | None = None):
    n_cases, problem = check_case_packs(ws.connection)
    assert problem == ""
    if expected_cases is not None:
        assert n_cases == expected_cases
    reference = fetch_contacts(ws.connection, method="row_by_row")
    for method in READ_METHODS:
        stored = fetch_contacts(ws.connection, method=method)
        assert_same_contacts(stored, reference)
        assert np.array_equal(stored.unscheduled, reference.unscheduled)
    for as_of in (20_100, 0):
        assert_same_contacts(fetch_contacts(ws.connection, as_of), fetch_contacts(ws.connection, as_of, row_by_row=True))


def n_packs(ws) -> int:
    return ws.connection.execute("SELECT COUNT(*) FROM case_packs").fetchone()[0]


@pytest.fixture
def filled(ws, tmp_path, rng):
    rows = ROWS + [[f"HS-9{r[0][3:]}"] + r[1:] for r in generated_rows(6, 4, rng)]
    import_timelines(ws, write_csv(tmp_path / "t.csv", rows), "tester")
    return ws


def test_import_of_new_cases_writes_one_pack_per_case(filled):
    assert n_packs(filled) == 9
    assert_in_step(filled, expected_cases=9)
    stages = [json.loads(t) for (t,) in filled.connection.execute(
        "SELECT stage_known FROM case_packs WHERE stage_known IS NOT NULL ORDER BY case_id")]
    assert stages == [["", "Struggling|Crisis"], ["Stable"]]  # HS-0001 (2 contacts), HS-0003


def test_import_into_stored_cases_and_replace_keep_the_packs_in_step(filled, tmp_path):
    more = [["HS-0001", "2025-06-01", "C4", "unable", "one", "", "0", "1", ""],      # a new contact of a stored case
            ["HS-0003", "2024-11-30", "C1", "slow", "several", "some", "1", "1", "Stable"],  # differs: replaced
            ["HS-0009", "2025-02-01", "C2", "normal", "", "", "0", "0", ""]]           # a new case
    with pytest.raises(InputError):  # a clash without --replace: nothing stored, the packs untouched
        import_timelines(filled, write_csv(tmp_path / "m.csv", more), "tester")
    assert_in_step(filled, expected_cases=9)
    import_timelines(filled, write_csv(tmp_path / "m.csv", more), "tester", replace=True)
    assert_in_step(filled, expected_cases=10)
    case = filled.connection.execute("SELECT id FROM cases WHERE case_code = 'HS-0001'").fetchone()[0]
    assert filled.connection.execute("SELECT n_contacts FROM case_packs WHERE case_id = ?", (case,)).fetchone()[0] == 3


def test_import_check_only_leaves_no_pack(ws, small_csv):
    import_timelines(ws, small_csv, "tester", check_only=True)
    assert n_packs(ws) == 0 and check_case_packs(ws.connection) == (0, "")


def test_record_correct_void_keep_the_packs_in_step(filled):
    from caseview.operations import casework

    casework.record_contact(filled, "HS-0002", "2025-03-01", "ann", values={"mobility": "slow"},
                            contact_kind="unscheduled")
    assert_in_step(filled)
    assert fetch_contacts(filled.connection).unscheduled.sum() == 1
    casework.add_case(filled, "HS-0100", "C1", "2025-03-02", "ann", covariates={"lives_alone": 1,
                                                                               "balance_programme": 0})
    assert_in_step(filled, expected_cases=10)
    casework.correct_contact(filled, "HS-0002", "2025-03-01", "typed the wrong day", "ann", new_date="2025-03-04",
                             values={"falls": "one"})
    assert_in_step(filled)
    casework.void_contact(filled, "HS-0100", "2025-03-02", "entered for the wrong person", "ann")
    assert_in_step(filled, expected_cases=9)  # HS-0100 has no current contact left: no pack
    casework.close_case(filled, "HS-0002", "2025-04-01", "moved", "ann")
    casework.reopen_case(filled, "HS-0002", "ann")
    assert_in_step(filled, expected_cases=9)


def test_a_new_channel_or_covariate_widens_every_pack(filled, model_text):
    data = json.loads(model_text)
    data["channels"].append({"name": "appetite", "kind": "categorical", "categories": ["good", "poor"],
                             "probabilities": {s: [0.5, 0.5] for s in data["stages"]}})
    data["covariates"].append({"name": "carer_at_home"})
    for transition in data["transitions"]:
        if "effects" in transition:
            transition["effects"]["carer_at_home"] = 0.0
    filled.add_model_version(json.dumps(data), "wider", "tester")
    assert filled.connection.execute("SELECT DISTINCT n_channels, n_covariates FROM case_packs").fetchall() == [(4, 3)]
    assert_in_step(filled, expected_cases=9)
    stored = fetch_contacts(filled.connection)
    assert np.all(stored.observations[:, 3] == schema.BLANK_CODE) and np.all(np.isnan(stored.covariates[:, 2]))


def test_opening_an_older_workspace_builds_the_packs(tmp_path, model_text, small_csv, monkeypatch):
    path = tmp_path / "old.cvw"
    with monkeypatch.context() as patch:  # a workspace made by a caseview from before the packs
        patch.setattr(schema, "MIGRATIONS", schema.MIGRATIONS[:schema.MIGRATIONS.index(schema.CASE_PACKS)])
        as_caseview_before_case_packs(patch)
        with Workspace.create(path, model_text, "tester") as old:
            import_timelines(old, small_csv, "tester")
    with Workspace.open(path) as ws:
        assert ws.connection.execute("PRAGMA user_version").fetchone()[0] == schema.schema_version()
        assert n_packs(ws) == 3
        assert_in_step(ws, expected_cases=3)
        assert ws.audit_verify().ok


def _forge(path, sql, *params):
    con = sqlite3.connect(path)
    con.execute(sql, params)
    con.commit()
    con.close()


def _pack_of(path, case_code: str) -> bytes:
    con = sqlite3.connect(path)
    try:
        return con.execute("SELECT p.contacts FROM case_packs p JOIN cases c ON c.id = p.case_id"
                           " WHERE c.case_code = ?", (case_code,)).fetchone()[0]
    finally:
        con.close()


@pytest.mark.parametrize("forgery, message", [
    ("changed value", "case HS-0002 packed contacts differ from its stored contacts"),
    ("DELETE FROM case_packs WHERE case_id = (SELECT id FROM cases WHERE case_code = 'HS-0001')",
     "case HS-0001 has no packed contacts"),
    ("UPDATE case_packs SET stage_known = NULL", "case HS-0001 packed contacts differ from its stored contacts"),
    ("INSERT INTO case_packs SELECT 99, n_contacts, n_channels, n_covariates, contacts, stage_known FROM case_packs"
     " WHERE case_id = 1", "1 packed case(s) belong to no stored case"),
])
def test_check_names_a_pack_that_differs_from_its_rows(ws, small_csv, capsys, forgery, message):
    import_timelines(ws, small_csv, "tester")
    path = ws.path
    ws.close()
    assert main(["check", str(path)]) == 0
    assert "packed contacts: 3 cases, all equal to their stored contacts" in capsys.readouterr().out
    if forgery == "changed value":  # the last covariate byte of HS-0002's last contact
        blob = _pack_of(path, "HS-0002")
        _forge(path, "UPDATE case_packs SET contacts = ? WHERE case_id = (SELECT id FROM cases WHERE "
               "case_code = 'HS-0002')", blob[:-1] + bytes([blob[-1] ^ 1]))
    else:
        con = sqlite3.connect(path)
        con.execute("PRAGMA foreign_keys = OFF")
        con.execute(forgery)
        con.commit()
        con.close()
    assert main(["check", str(path)]) == 4
    out = capsys.readouterr().out
    assert f"PROBLEM: packed contacts (the fast copy scoring reads): {message}" in out
    assert "all match the audit trail" in out  # the record itself is untouched


def test_a_pack_of_the_wrong_width_is_refused_not_misread(ws, small_csv):
    from caseview.errors import WorkspaceError

    import_timelines(ws, small_csv, "tester")
    blob = ws.connection.execute("SELECT contacts FROM case_packs WHERE case_id = 1").fetchone()[0]
    ws.connection.execute("UPDATE case_packs SET contacts = ? WHERE case_id = 1", (blob + b"\x00",))
    with pytest.raises(WorkspaceError, match="damaged"):
        fetch_contacts(ws.connection)


def test_an_import_written_in_small_steps_is_the_same(ws, tmp_path, rng, monkeypatch):
    """The writer turns rows into Python objects a step at a time (memory at a million cases); steps of a few
    rows store the same contacts, packs and case digests as one step."""
    from caseview.storage import contact_writer, row_digests

    monkeypatch.setattr(contact_writer, "ROWS_PER_STEP", 3)
    rows = ROWS + [[f"HS-9{r[0][3:]}"] + r[1:] for r in generated_rows(6, 4, rng)]
    import_timelines(ws, write_csv(tmp_path / "t.csv", rows), "tester")
    assert ws.contact_count() == len(rows)
    assert_in_step(ws, expected_cases=9)
    recorded = dict(ws.connection.execute("SELECT key, digest FROM row_digests WHERE set_name = 'cases'").fetchall())
    assert recorded == {k: v.hex() for k, v in row_digests.current_case_digests(ws.connection).items()}
    assert ws.audit_verify().ok
