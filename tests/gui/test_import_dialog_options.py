"""The import dialog offers the command line's import choices (issue 15 item 4): header row, date
format (with the importer's suggestion one click away) and the importer's notes; a hostile
workbook is refused in the preview with the importer's message."""

from __future__ import annotations

import zipfile

import pytest

from .conftest import open_ws

pytestmark = pytest.mark.gui

HEADER = "case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme"


def _dialog(window, qtbot):
    from caseview.gui.import_dialog import ImportDialog

    dialog = ImportDialog(window.source, "tester", window)
    qtbot.addWidget(dialog)
    return dialog


def _items(dialog):
    return [dialog.problems.item(i).text() for i in range(dialog.problems.count())]


def test_title_rows_day_first_dates_and_notes(window, qtbot, workspace_path, tmp_path):
    open_ws(window, qtbot, workspace_path)
    before = window.workspace().contact_count()
    path = tmp_path / "visits.csv"
    path.write_text("Visits exported for the team,,,\n" + HEADER + "\n"
                    "HS-900001,25/03/2026,C1,Normal,none,none,0,0\n"
                    "HS-900001,02/04/2026,C1,slow,none,none,0,0\n", encoding="utf-8")
    dialog = _dialog(window, qtbot)
    dialog.load_file(path)
    assert dialog.preview.horizontalHeaderItem(0).text() == "Visits exported for the team"
    dialog.header_row.setValue(2)
    assert [dialog.preview.horizontalHeaderItem(j).text() for j in range(2)] == ["case_id", "date"]
    assert dialog.preview.rowCount() == 2
    dialog.check()
    qtbot.waitUntil(lambda: dialog.check_button.isEnabled() and dialog.problems.count() > 0, timeout=30000)
    assert any("line 3" in t and "try --date-format %d/%m/%Y" in t for t in _items(dialog))
    assert not dialog.use_suggestion.isHidden() and dialog.use_suggestion.text() == "Use date format %d/%m/%Y"
    dialog.use_suggestion.click()
    qtbot.waitUntil(lambda: dialog.import_button.isEnabled(), timeout=30000)
    assert dialog.import_options() == {"date_format": "%d/%m/%Y", "header_row": 2}
    assert any(t.startswith("note: visits.csv: column 'mobility': read 'Normal' as 'normal' 1 time")
               for t in _items(dialog))
    assert window.workspace().contact_count() == before
    dialog.do_import()
    qtbot.waitUntil(lambda: window.workspace().contact_count() == before + 2, timeout=30000)
    entry = window.workspace().audit_entries()[-1]
    assert entry.details["options"] == {"date_format": "%d/%m/%Y", "header_row": 2}


def test_hostile_workbook_is_refused_in_the_preview(window, qtbot, workspace_path, tmp_path):
    open_ws(window, qtbot, workspace_path)
    path = tmp_path / "bomb.xlsx"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("xl/worksheets/sheet1.xml", b" " * (20 << 20), compresslevel=9)
    dialog = _dialog(window, qtbot)
    dialog.load_file(path)
    assert dialog.summary.text().startswith("bomb.xlsx: ") and "zip bomb" in dialog.summary.text()
    assert dialog.preview.rowCount() == 0 and not dialog.import_button.isEnabled()
