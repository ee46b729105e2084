"""The optional contact_kind column: import, storage (its own migration), reading into hmm.Timelines, export."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from storage_helpers import DEMO_MODEL_PATH, HEADER, ROWS, write_csv

from caseview.errors import InputError

KINDS = ["scheduled", "unscheduled", "", "Unscheduled", "scheduled"]  # blank = scheduled; case-insensitive


def rows_with_kinds(kinds=KINDS):
    return [row + [kind] for row, kind in zip(ROWS, kinds)]


def test_import_stores_and_loads_the_kind(ws, tmp_path):
    from caseview.timeline_io import import_timelines

    import_timelines(ws, write_csv(tmp_path / "t.csv", rows_with_kinds(), HEADER + ["contact_kind"]), "tester")
    model, _ = ws.current_model()
    caseload = ws.load_caseload(model)
    t = caseload.timelines
    by_contact = {(code, int(day)): bool(u) for code, day, u in
                  zip(np.repeat(caseload.case_ids, t.n_contacts_per_case), caseload.contact_days, t.unscheduled)}
    day = lambda text: int(np.datetime64(text, "D").astype(int))  # noqa: E731
    assert by_contact == {("HS-0001", day("2025-01-05")): True, ("HS-0001", day("2025-03-05")): False,
                          ("HS-0002", day("2025-01-10")): False, ("HS-0002", day("2025-02-10")): True,
                          ("HS-0003", day("2024-11-30")): False}
    # HS-0001 on 2025-03-05 was "" (scheduled); HS-0002 on 2025-02-10 "Unscheduled"
    stored = ws.stored_contacts()
    assert stored.unscheduled.sum() == 2


def test_without_the_column_every_contact_is_scheduled_and_timelines_carry_nothing(ws, tmp_path):
    from caseview.timeline_io import import_timelines

    import_timelines(ws, write_csv(tmp_path / "t.csv", ROWS), "tester")
    model, _ = ws.current_model()
    assert ws.load_caseload(model).timelines.unscheduled is None


def test_an_unknown_kind_is_one_clear_problem_and_nothing_is_stored(ws, tmp_path):
    from caseview.timeline_io import import_timelines

    path = write_csv(tmp_path / "t.csv", rows_with_kinds(["scheduled", "urgent", "", "", ""]),
                     HEADER + ["contact_kind"])
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    message = str(info.value)
    assert "line 3, column 'contact_kind'" in message and "'urgent'" in message
    assert "expected scheduled, unscheduled or blank" in message
    assert ws.stored_contacts().days.size == 0


def test_a_second_import_with_a_different_kind_is_a_conflict_unless_replaced(ws, tmp_path):
    from caseview.storage import ContactConflicts  # noqa: F401  (the writer's conflict type)
    from caseview.timeline_io import import_timelines

    import_timelines(ws, write_csv(tmp_path / "a.csv", rows_with_kinds(), HEADER + ["contact_kind"]), "tester")
    changed = rows_with_kinds(["unscheduled"] + KINDS[1:])
    path = write_csv(tmp_path / "b.csv", changed, HEADER + ["contact_kind"])
    with pytest.raises(InputError, match="contact_kind"):
        import_timelines(ws, path, "tester")
    import_timelines(ws, path, "tester", replace=True)
    assert ws.stored_contacts().unscheduled.sum() == 3


def test_export_round_trips_the_kind(ws, tmp_path):
    from caseview.timeline_io import import_timelines
    from caseview.timeline_io.exporter import export_timelines

    import_timelines(ws, write_csv(tmp_path / "t.csv", rows_with_kinds(), HEADER + ["contact_kind"]), "tester")
    out = tmp_path / "out.csv"
    export_timelines(ws, out, "tester")
    with open(out, encoding="utf-8") as fh:
        exported = {(r["case_id"], r["date"]): r["contact_kind"] for r in csv.DictReader(fh)}
    assert exported[("HS-0002", "2025-02-10")] == "unscheduled"
    assert sorted(exported.values()).count("scheduled") == 3
    from caseview.storage import Workspace

    fresh = Workspace.create(tmp_path / "fresh.cvw", DEMO_MODEL_PATH.read_text(encoding="utf-8"), actor="tester")
    try:
        import_timelines(fresh, out, "tester")
        assert np.array_equal(fresh.stored_contacts().unscheduled, ws.stored_contacts().unscheduled)
    finally:
        fresh.close()


def test_an_older_workspace_gains_the_column_with_every_contact_scheduled(tmp_path, monkeypatch):
    from caseview.storage import Workspace, schema
    from caseview.timeline_io import import_timelines

    path = tmp_path / "old.cvw"
    # an older workspace: written by a caseview whose migrations stopped just before CONTACT_KIND
    monkeypatch.setattr(schema, "MIGRATIONS", schema.MIGRATIONS[:schema.MIGRATIONS.index(schema.CONTACT_KIND)])
    from caseview.storage import row_digests  # ... whose case digests did not read the (missing) column

    monkeypatch.setattr(row_digests, "_CASE_ROWS", row_digests._CASE_ROWS.replace("c.contact_kind", "'scheduled'"))
    old = Workspace.create(path, DEMO_MODEL_PATH.read_text(encoding="utf-8"), actor="tester")
    try:
        columns = [r[1] for r in old.connection.execute("PRAGMA table_info(contacts)")]
        assert "contact_kind" not in columns
    finally:
        old.close()
    monkeypatch.undo()
    # contacts written before the migration (plain SQL, as an older caseview would have)
    import sqlite3

    con = sqlite3.connect(path)
    con.execute("INSERT INTO cases (id, case_code) VALUES (1, 'HS-0001')")
    con.execute("INSERT INTO contacts (case_id, day, observations, covariates) VALUES (1, 20000, ?, ?)",
                (bytes([255, 255, 255]), np.zeros(2, dtype="<f8").tobytes()))  # blank values, covariates 0
    con.commit()
    con.close()
    ws = Workspace.open(path)
    try:
        assert [r[0] for r in ws.connection.execute("SELECT contact_kind FROM contacts")] == ["scheduled"]
        import_timelines(ws, write_csv(tmp_path / "t.csv", rows_with_kinds(), HEADER + ["contact_kind"]), "tester")
        stored = ws.stored_contacts()
        assert stored.unscheduled.sum() == 2 and stored.days.size == 6
    finally:
        ws.close()
