"""Strict import: every kind of bad value named with line/column, all or nothing, duplicates,
--map/--drop, encodings, XLSX, and the export round trip (import(export(x)) == x)."""

from __future__ import annotations

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.timeline_io import export_timelines, import_timelines
from storage_helpers import HEADER, ROWS, generated_rows, write_csv


def _state(ws):
    model, _ = ws.current_model()
    c = ws.load_caseload(model)
    return (c.case_ids.tolist(), c.coordinators.tolist(), c.contact_days.tolist(),
            c.timelines.observations.tolist(), c.timelines.covariates.tolist(), c.timelines.allowed_stages.tolist(),
            {k: v.tolist() for k, v in c.raw_values.items()})


def test_import_counts_and_idempotent_reimport(ws, small_csv):
    first = import_timelines(ws, small_csv, "tester")
    assert (first.cases_added, first.contacts_added, first.duplicates_skipped, first.replaced) == (3, 5, 0, 0)
    snapshot = _state(ws)
    again = import_timelines(ws, small_csv, "tester")
    assert (again.cases_added, again.contacts_added, again.duplicates_skipped, again.replaced) == (0, 0, 5, 0)
    assert _state(ws) == snapshot
    entry = ws.audit_entries()[-1]
    assert entry.action == "import" and entry.details["sha256"] == first.sha256
    import hashlib

    assert first.sha256 == hashlib.sha256(small_csv.read_bytes()).hexdigest()


@pytest.mark.parametrize("column,value,expected", [
    ("case_id", "", "empty case ID"),
    ("case_id", "=cmd|' /C calc'!A0", "formula"),
    ("case_id", "+HS-1", "formula"),
    ("case_id", "@SUM(A1)", "formula"),
    ("case_id", "HS\x0b01", "control characters"),
    ("case_id", "H" * 65, "at most 64"),
    ("coordinator", "-C1", "formula"),
    ("date", "2025-02-30", "not a calendar date"),
    ("date", "05/01/2025", "YYYY-MM-DD"),
    ("date", "", "empty date"),
    ("date", "1850-01-01", "not a calendar date"),
    ("mobility", "Unabel", "unknown category"),
    ("lives_alone", "yes", "expected a finite number"),
    ("lives_alone", "", "blank value"),
    ("balance_programme", "inf", "expected a finite number"),
    ("stage_known", "Dead", "unknown stage"),
    ("stage_known", "Stable|Gone", "unknown stage"),
])
def test_bad_values_are_named_and_nothing_is_written(ws, tmp_path, column, value, expected):
    rows = [list(r) for r in ROWS]
    rows[2][HEADER.index(column)] = value  # line 4 of the file (header = line 1)
    path = write_csv(tmp_path / "bad.csv", rows)
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    message = str(info.value)
    assert message.splitlines()[0].endswith("nothing was imported")
    assert f"line 4, column '{column}'" in message
    assert expected in message
    assert ws.contact_count() == 0 and ws.case_count() == 0


def test_all_problems_reported_with_cap(ws, tmp_path):
    rows = [[f"HS-{i:04d}", "2025-13-01", "C1", "fast", "", "", "x", "0", ""] for i in range(1, 41)]
    path = write_csv(tmp_path / "many.csv", rows)
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    lines = str(info.value).splitlines()
    assert lines[0].startswith(f"{path.name}: 120 problems found")
    assert len(lines) == 1 + 50 + 1 and lines[-1] == "... and 70 more"


def test_identifier_values_are_masked_never_echoed(ws, tmp_path):
    rows = [list(r) for r in ROWS]
    rows[0][0] = "jane.doe@example.org"
    path = write_csv(tmp_path / "pii.csv", rows)
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    assert "jane.doe@example.org" not in str(info.value)
    assert "line 2, column 'case_id'" in str(info.value)
    assert ws.contact_count() == 0


def test_header_problems(ws, tmp_path):
    path = write_csv(tmp_path / "h.csv", [r + ["x"] for r in ROWS], header=HEADER + ["client_email"])
    with pytest.raises(InputError, match="unknown column"):
        import_timelines(ws, path, "tester")
    result = import_timelines(ws, path, "tester", drop=["client_email"])
    assert result.contacts_added == 5
    missing = write_csv(tmp_path / "m.csv", [r[:6] for r in ROWS], header=HEADER[:6])
    with pytest.raises(InputError, match="required column 'lives_alone' is missing"):
        import_timelines(ws, missing, "tester")
    dup = write_csv(tmp_path / "d.csv", [r + [r[1]] for r in ROWS], header=HEADER + ["date"])
    with pytest.raises(InputError, match="appears twice"):
        import_timelines(ws, dup, "tester")
    with pytest.raises(InputError, match="--drop nope"):
        import_timelines(ws, path, "tester", drop=["client_email", "nope"])


def test_map_renames_columns(ws, tmp_path):
    header = ["ClientRef", "Visit date"] + HEADER[2:]
    path = write_csv(tmp_path / "mapped.csv", ROWS, header=header)
    with pytest.raises(InputError, match="unknown column"):
        import_timelines(ws, path, "tester")
    result = import_timelines(ws, path, "tester", mapping={"ClientRef": "case_id", "Visit date": "date"})
    assert result.contacts_added == 5
    assert ws.audit_entries()[-1].details["mapping"] == {"ClientRef": "case_id", "Visit date": "date"}


def test_conflicting_duplicates_error_then_replace_is_audited(ws, small_csv, tmp_path):
    import_timelines(ws, small_csv, "tester")
    before = _state(ws)
    rows = [list(r) for r in ROWS]
    rows[1][HEADER.index("concern")] = "serious"  # HS-0001 on 2025-01-05 changes
    rows.append(["HS-0009", "2025-05-01", "C4", "", "", "", "0", "0", ""])
    changed = write_csv(tmp_path / "changed.csv", rows)
    with pytest.raises(InputError) as info:
        import_timelines(ws, changed, "tester")
    assert "line 3" in str(info.value) and "already has a contact on 2025-01-05" in str(info.value)
    assert _state(ws) == before and ws.case_count() == 3  # HS-0009 was not added either
    result = import_timelines(ws, changed, "tester", replace=True)
    assert (result.cases_added, result.contacts_added, result.duplicates_skipped, result.replaced) == (1, 1, 4, 1)
    entry = ws.audit_entries()[-1]
    assert entry.action == "import.replace"
    [detail] = entry.details["replaced_contacts"]
    assert detail["case_id"] == "HS-0001" and detail["old_sha256"] != detail["new_sha256"]
    assert len(detail["old_sha256"]) == 64
    assert [e.id for e in ws.audit_entries(case_id="HS-0001")] == [entry.id]
    model, _ = ws.current_model()
    caseload = ws.load_caseload(model)
    assert caseload.raw_values["concern"][0] == "serious"


def test_conflict_inside_one_file(ws, tmp_path):
    rows = [list(r) for r in ROWS] + [list(ROWS[1])]
    same = write_csv(tmp_path / "same.csv", rows)
    assert import_timelines(ws, same, "tester").duplicates_skipped == 1
    rows[-1][HEADER.index("falls")] = "several"
    different = write_csv(tmp_path / "different.csv", rows)
    with pytest.raises(InputError, match="second contact on 2025-01-05"):
        import_timelines(ws, different, "tester", replace=True)


def test_encodings(ws, tmp_path):
    bom = write_csv(tmp_path / "bom.csv", ROWS, bom=True)
    assert import_timelines(ws, bom, "tester").contacts_added == 5
    text = (",".join(HEADER) + "\n" + "\n".join(",".join(r) for r in ROWS) + "\n")
    utf16 = tmp_path / "utf16.csv"
    utf16.write_bytes(text.encode("utf-16"))
    with pytest.raises(InputError, match="UTF-16"):
        import_timelines(ws, utf16, "tester")
    latin = tmp_path / "latin.csv"
    latin.write_bytes(text.replace("HS-0003", "HS-0003\u00e9").encode("latin-1"))
    with pytest.raises(InputError, match=r"line 6: byte offset \d+: not UTF-8"):
        import_timelines(ws, latin, "tester")
    empty = tmp_path / "empty.csv"
    empty.write_bytes(b"")
    with pytest.raises(InputError, match="empty"):
        import_timelines(ws, empty, "tester")
    with pytest.raises(InputError, match="not found"):
        import_timelines(ws, tmp_path / "absent.csv", "tester")
    assert ws.contact_count() == 5


def test_xlsx_import_names_sheet_and_row(ws, tmp_path):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    sheet.title = "Visits"
    sheet.append(HEADER)
    for r in ROWS:
        sheet.append([np.datetime64(r[1]).astype(object) if i == 1 else (int(v) if i in (6, 7) else v)
                      for i, v in enumerate(r)])
    good = tmp_path / "good.xlsx"
    book.save(good)
    assert import_timelines(ws, good, "tester").contacts_added == 5
    sheet.append(["HS-0100", "2025-02-30", "C1", "", "", "", 0, 0, ""])
    bad = tmp_path / "bad.xlsx"
    book.save(bad)
    with pytest.raises(InputError, match=r"sheet 'Visits', row 7, column 'date'"):
        import_timelines(ws, bad, "tester")
    assert ws.contact_count() == 5


@pytest.mark.parametrize("suffix", [".csv", ".xlsx"])
def test_export_round_trip(ws, tmp_path, model_text, rng, suffix):
    from caseview.storage import Workspace

    rows = generated_rows(30, 6, rng)
    rows[3][HEADER.index("stage_known")] = "Crisis|Struggling"
    source = write_csv(tmp_path / "source.csv", rows[::-1])
    import_timelines(ws, source, "tester")
    out = tmp_path / f"export{suffix}"
    result = export_timelines(ws, out, "tester")
    assert result.rows == len(rows) and result.audit_head == ws.audit_head()
    assert ws.audit_entries()[-1].action == "export"
    with Workspace.create(tmp_path / "copy.cvw", model_text, "tester") as copy:
        import_timelines(copy, out, "tester")
        assert _state(copy) == _state(ws)


def test_export_escapes_formula_like_text(ws, tmp_path, model_text):
    import json

    from caseview.timeline_io.exporter import escape_text

    escaped = escape_text(np.array(["=1+1", "-x", "@a", "+b", "ok", ""], dtype=object))
    assert escaped.tolist() == ["'=1+1", "'-x", "'@a", "'+b", "ok", ""]  # OWASP CSV injection advice
    data = json.loads(model_text)
    data["channels"][0]["categories"] = ["normal", "slow", "=unable"]
    ws.add_model_version(json.dumps(data), "odd labels", "tester")
    rows = [list(r) for r in ROWS]
    rows[3][3] = "=unable"
    import_timelines(ws, write_csv(tmp_path / "odd.csv", rows), "tester")
    out = tmp_path / "odd-export.csv"
    export_timelines(ws, out, "tester")
    assert "'=unable" in out.read_text() and "\n=unable" not in out.read_text() and ",=unable" not in out.read_text()


def test_check_only_reports_what_an_import_would_do_and_stores_nothing(ws, small_csv, tmp_path):
    before, audit_before = _state(ws), len(ws.audit_entries())
    checked = import_timelines(ws, small_csv, "tester", check_only=True)
    assert checked.check_only and checked.audit_id is None
    assert _state(ws) == before and len(ws.audit_entries()) == audit_before
    done = import_timelines(ws, small_csv, "tester")
    assert (checked.cases_added, checked.contacts_added, checked.duplicates_skipped) == \
        (done.cases_added, done.contacts_added, done.duplicates_skipped) == (3, 5, 0)
    # a clash with stored contacts is found by the check too, and still nothing changes
    rows = [list(r) for r in ROWS]
    rows[1][HEADER.index("concern")] = "serious"
    changed = write_csv(tmp_path / "changed.csv", rows)
    stored, audit_stored = _state(ws), len(ws.audit_entries())
    with pytest.raises(InputError, match="already has a contact on 2025-01-05"):
        import_timelines(ws, changed, "tester", check_only=True)
    would = import_timelines(ws, changed, "tester", check_only=True, replace=True)
    assert would.replaced == 1
    assert _state(ws) == stored and len(ws.audit_entries()) == audit_stored
