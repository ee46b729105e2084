"""Import that meets real spreadsheets half way (issue 15 item 4) and the import's identifier-screen
leaks and silent column shifts (issue 12 items 6 and 10): all or nothing, never guessing silently."""

from __future__ import annotations

import datetime as dt

import pytest

from caseview.errors import InputError
from caseview.timeline_io import import_timelines
from storage_helpers import HEADER, ROWS, write_csv


def _days(ws):
    model, _ = ws.current_model()
    caseload = ws.load_caseload(model)
    return sorted(str(d) for d in caseload.contact_days.astype("datetime64[D]"))


def _with_dates(rows, dates):
    out = [list(r) for r in rows]
    for r, d in zip(out, dates):
        r[1] = d
    return out


def test_date_format_option_reads_day_first_dates(ws, tmp_path):
    path = write_csv(tmp_path / "uk.csv", _with_dates(ROWS, ["10/01/2025", "05/01/2025", "05/03/2025", "10/02/2025",
                                                             "30/11/2024"]))
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    message = str(info.value)
    assert "line 6, column 'date'" in message and "try --date-format %d/%m/%Y" in message
    assert "try --date-format %d/%m/%Y (day first) or %m/%d/%Y (month first)" in message   # 10/01/2025
    result = import_timelines(ws, path, "tester", date_format="%d/%m/%Y")
    assert result.contacts_added == 5
    assert _days(ws) == ["2024-11-30", "2025-01-05", "2025-01-10", "2025-02-10", "2025-03-05"]
    assert ws.audit_entries()[-1].details["options"] == {"date_format": "%d/%m/%Y", "header_row": 1}


def test_date_format_is_strict_and_checked(ws, tmp_path):
    path = write_csv(tmp_path / "mixed.csv", _with_dates(ROWS, ["10/01/2025", "2025-01-05", "05/03/2025",
                                                                "10/02/2025", "30/11/2024"]))
    with pytest.raises(InputError, match="line 3, column 'date'.*write all dates one way"):
        import_timelines(ws, path, "tester", date_format="%d/%m/%Y")
    with pytest.raises(InputError, match="--date-format '%d/%Y'"):
        import_timelines(ws, path, "tester", date_format="%d/%Y")
    assert ws.contact_count() == 0


@pytest.mark.parametrize("value,hint", [
    ("31/12/2025", "try --date-format %d/%m/%Y"), ("12/31/2025", "try --date-format %m/%d/%Y"),
    ("2025/01/05", "try --date-format %Y/%m/%d"), ("05.01.25", "%d.%m.%y (day first) or %m.%d.%y (month first)"),
    ("2025-01-05 10:30", "try --date-format '%Y-%m-%d %H:%M'"), ("45292", "Excel serial day number"),
])
def test_date_hints_name_the_option_that_reads_the_value(ws, tmp_path, value, hint):
    from caseview.gui.import_dialog import suggested_date_format

    rows = [list(r) for r in ROWS]
    rows[0][1] = value
    with pytest.raises(InputError) as info:
        import_timelines(ws, write_csv(tmp_path / "d.csv", rows), "tester")
    assert hint in str(info.value)
    if "try --date-format" in hint:   # the window's button offers the same format, and it reads the value
        fmt = suggested_date_format(str(info.value).splitlines())
        rows = [list(r) for r in ROWS[:1]]
        rows[0][1] = value
        assert import_timelines(ws, write_csv(tmp_path / "e.csv", rows), "tester", date_format=fmt).contacts_added == 1


def test_header_row_option_skips_title_rows(ws, tmp_path):
    path = tmp_path / "titled.csv"
    text = "Home visits export,,,\nprepared for the team meeting,,,\n" + ",".join(HEADER) + "\n"
    text += "\n".join(",".join(r) for r in ROWS) + "\n"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=r"titled.csv: line 1: does not look like a header row.*--header-row N"):
        import_timelines(ws, path, "tester")
    result = import_timelines(ws, path, "tester", header_row=3)
    assert result.contacts_added == 5
    bad = [list(r) for r in ROWS]
    bad[1][1] = "2025-02-30"
    path.write_text(text.replace("2025-01-05", "2025-02-30"), encoding="utf-8")
    with pytest.raises(InputError, match=r"line 5, column 'date'"):   # line numbers count the title rows
        import_timelines(ws, path, "tester", header_row=3)


def test_categories_ignore_case_and_spaces_and_are_reported(ws, tmp_path):
    rows = [list(r) for r in ROWS]
    rows[0][3], rows[1][3], rows[3][3] = "Normal", " SLOW ", "Unable"
    rows[2][5] = "Serious"
    result = import_timelines(ws, write_csv(tmp_path / "caps.csv", rows), "tester")
    assert result.contacts_added == 5
    notes = " ".join(result.notes)
    assert "column 'mobility': " in notes and "read 'Normal' as 'normal' 1 time" in notes
    assert "read 'SLOW' as 'slow' 1 time" in notes and "read 'Serious' as 'serious' 1 time" in notes
    model, _ = ws.current_model()
    assert set(ws.load_caseload(model).raw_values["mobility"].tolist()) - {""} == {"normal", "slow", "unable"}


def test_xlsx_date_cells_and_serial_day_numbers(ws, tmp_path):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    sheet.append(HEADER)
    sheet.append(["HS-0001", dt.datetime(2025, 1, 5, 14, 30), "C1", "normal", "none", "none", 1, 0, None])
    sheet.append(["HS-0001", 45722, "C1", "normal", "none", "none", 1, 0, None])   # Excel day 45722 = 2025-03-06
    sheet.append(["HS-0002", dt.date(2025, 2, 1), "C1", "normal", "none", "none", 1, 0, None])
    path = tmp_path / "dates.xlsx"
    book.save(path)
    result = import_timelines(ws, path, "tester", date_format="%d/%m/%Y")  # date cells need no format
    assert _days(ws) == ["2025-01-05", "2025-02-01", "2025-03-06"]
    assert any("read 1 Excel day number in the date column as dates (e.g. 45722 as 06/03/2025" in n
               for n in result.notes)


def test_first_data_row_with_extra_separators_is_refused(ws, tmp_path):
    path = tmp_path / "shifted.csv"
    rows = [",".join(HEADER)] + ["HS-0001,x," + ",".join(ROWS[1][1:])] + [",".join(r) for r in ROWS[2:]]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"shifted.csv: line 2, column 10: the row has 10 cells but the header has 9"):
        import_timelines(ws, path, "tester")
    assert ws.contact_count() == 0


def test_headerless_file_never_echoes_its_first_row(ws, tmp_path):
    row = ["HS-0001", "2025-01-05", "Mary Smith", "07700 900123", "none", "none", "1", "0", ""]
    path = write_csv(tmp_path / "noheader.csv", [ROWS[0]], header=row)
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    message = str(info.value)
    assert "does not look like a header row" in message
    for cell in row[:4]:
        assert cell not in message


def test_unknown_column_name_that_looks_like_an_identifier_is_masked(ws, tmp_path):
    path = write_csv(tmp_path / "extra.csv", [r + ["x"] for r in ROWS], header=HEADER + ["mary.smith@example.org"])
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    assert "mary.smith@example.org" not in str(info.value) and "column 10" in str(info.value)


def test_masked_stage_known_value_is_not_repeated(ws, tmp_path):
    rows = [list(r) for r in ROWS]
    rows[0][8] = "Stable|jane.doe@example.org"
    rows[1][8] = "call 07700 900123"
    with pytest.raises(InputError) as info:
        import_timelines(ws, write_csv(tmp_path / "stage.csv", rows), "tester")
    message = str(info.value)
    assert "jane.doe@example.org" not in message and "07700 900123" not in message
    assert "line 2, column 'stage_known'" in message and "line 3, column 'stage_known'" in message


def test_identifier_in_the_file_name_is_not_written_to_the_audit_trail(ws, tmp_path):
    path = write_csv(tmp_path / "visits jane.doe@example.org 1948-03-12.csv", ROWS)
    result = import_timelines(ws, path, "tester")
    entry = ws.audit_entries()[-1]
    text = f"{entry.target} {entry.details}"
    assert "jane.doe" not in text and "1948" not in text
    assert entry.target == f"file {result.sha256[:12]}.csv (name withheld)"
    named = write_csv(tmp_path / "Mary Smith visits.csv", ROWS[:2])
    import_timelines(ws, named, "tester")
    assert "Smith" not in ws.audit_entries()[-1].target
    plain = write_csv(tmp_path / "march visits.csv", ROWS[:1])
    import_timelines(ws, plain, "tester")
    assert ws.audit_entries()[-1].target == "march visits.csv"
    from caseview.timeline_io import export_timelines

    exported = export_timelines(ws, tmp_path / "for Mrs Jones.csv", "tester")
    entry = ws.audit_entries()[-1]
    assert entry.action == "export" and "Jones" not in f"{entry.target} {entry.details}"
    assert entry.target == f"file {exported.sha256[:12]}.csv (name withheld)"


def test_messages_name_the_file_not_its_folder(ws, tmp_path):
    folder = tmp_path / "Mary Smith's documents"
    folder.mkdir()
    rows = [list(r) for r in ROWS]
    rows[0][1] = "2025-13-01"
    path = write_csv(folder / "visits.csv", rows)
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    assert "Mary Smith" not in str(info.value) and str(info.value).startswith("visits.csv: ")


@pytest.mark.parametrize("actor", ["a\nb", "x\tz", "x\u202ey"])
def test_actor_with_control_characters_is_refused(ws, small_csv, actor):
    with pytest.raises(InputError, match="control character"):
        import_timelines(ws, small_csv, actor)
    assert ws.contact_count() == 0
