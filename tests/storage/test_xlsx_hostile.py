"""Hostile .xlsx files (issue 12 item 5): zip bombs, padding bombs and entity expansion are refused
quickly with a clear message (never "internal error"), and nothing is stored."""

from __future__ import annotations

import time
import zipfile

import pytest

from caseview.errors import InputError
from caseview.timeline_io import import_timelines
from storage_helpers import HEADER, ROWS

SHEET = "xl/worksheets/sheet1.xml"
NS = 'xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"'


def _base_workbook(path):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    sheet.append(HEADER)
    for r in ROWS[:2]:
        sheet.append([int(v) if i in (6, 7) else v for i, v in enumerate(r)])
    book.save(path)
    return path


def _replace_parts(source, target, parts: dict, extra: dict | None = None):
    """Copy the workbook ``source`` to ``target`` with some parts' bytes replaced (or added)."""
    with zipfile.ZipFile(source) as old, zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as new:
        for item in old.infolist():
            data = parts.get(item.filename, old.read(item.filename))
            new.writestr(item.filename, data, compress_type=zipfile.ZIP_DEFLATED, compresslevel=9)
        for name, data in (extra or {}).items():
            new.writestr(name, data, compress_type=zipfile.ZIP_DEFLATED, compresslevel=9)
    return target


def _inline_row(number: int, values) -> str:
    cells = "".join(f'<c r="{chr(65 + j)}{number}" t="inlineStr"><is><t>{v}</t></is></c>' for j, v in enumerate(values)
                    if v != "")
    return f'<row r="{number}">{cells}</row>'


def _assert_refused(ws, path, *fragments, seconds=2.0):
    start = time.perf_counter()
    with pytest.raises(InputError) as info:
        import_timelines(ws, path, "tester")
    elapsed = time.perf_counter() - start
    message = str(info.value)
    for fragment in fragments:
        assert fragment in message
    assert "internal error" not in message and message.startswith(path.name)
    assert ws.case_count() == 0
    assert elapsed < seconds, f"refusal took {elapsed:.2f} s"
    return message


def test_zip_bomb_is_refused_from_the_directory_before_parsing(ws, tmp_path):
    base = _base_workbook(tmp_path / "base.xlsx")
    sheet = (f'<?xml version="1.0"?><worksheet {NS}><sheetData>' + _inline_row(1, HEADER)
             + " " * (100 << 20) + "</sheetData></worksheet>").encode()
    bomb = _replace_parts(base, tmp_path / "bomb.xlsx", {SHEET: sheet})
    assert bomb.stat().st_size < 400_000           # 100 MiB of sheet in a few hundred kB
    _assert_refused(ws, bomb, "looks like a zip bomb", "compressed")


def test_too_many_parts_are_refused(ws, tmp_path):
    base = _base_workbook(tmp_path / "base.xlsx")
    many = _replace_parts(base, tmp_path / "many.xlsx", {}, {f"xl/media/x{i}.bin": b"x" for i in range(1001)})
    _assert_refused(ws, many, "parts")


def test_declared_sheet_size_never_pads_rows(ws, tmp_path):
    """A 5 kB sheet declaring 16,384 columns x 1,048,576 rows (the old reader padded every row to it)."""
    base = _base_workbook(tmp_path / "base.xlsx")
    rows = [_inline_row(1, HEADER)] + [_inline_row(i + 2, r) for i, r in enumerate(ROWS[:3])]
    sheet = (f'<?xml version="1.0"?><worksheet {NS}><dimension ref="A1:XFD1048576"/><sheetData>' + "".join(rows)
             + '<row r="1048576"><c r="XFD1048576"/></row></sheetData></worksheet>').encode()
    padded = _replace_parts(base, tmp_path / "padded.xlsx", {SHEET: sheet})
    assert padded.stat().st_size < 8_000
    start = time.perf_counter()
    result = import_timelines(ws, padded, "tester")
    assert time.perf_counter() - start < 5
    assert result.contacts_added == 3


def test_value_far_beyond_the_header_is_refused_without_padding(ws, tmp_path):
    base = _base_workbook(tmp_path / "base.xlsx")
    sheet = (f'<?xml version="1.0"?><worksheet {NS}><sheetData>' + _inline_row(1, HEADER)
             + '<row r="2"><c r="XFD2" t="inlineStr"><is><t>x</t></is></c></row></sheetData></worksheet>').encode()
    far = _replace_parts(base, tmp_path / "far.xlsx", {SHEET: sheet})
    _assert_refused(ws, far, "row 2, column 16384", "beyond the 9 header columns")


LAUGHS = ('<!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol1 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">'
          + "".join(f'<!ENTITY lol{i} "' + f"&lol{i - 1};" * 10 + '">' for i in range(2, 10)) + "]>")


@pytest.mark.parametrize("hidden", [False, True])
def test_entity_expansion_gets_a_clear_message(ws, tmp_path, hidden):
    """Billion laughs (OWASP XML External Entity Prevention Cheat Sheet) in the sheet XML; ``hidden``
    puts it behind 70 kB of comment so only the XML parser can see it."""
    base = _base_workbook(tmp_path / "base.xlsx")
    padding = "<!--" + "x" * 70_000 + "-->" if hidden else ""
    sheet = (f'<?xml version="1.0"?>{padding}{LAUGHS}<worksheet {NS}><sheetData>' + _inline_row(1, HEADER)
             + '<row r="2"><c r="A2" t="inlineStr"><is><t>&lol9;</t></is></c></row></sheetData></worksheet>').encode()
    laughs = _replace_parts(base, tmp_path / "laughs.xlsx", {SHEET: sheet})
    _assert_refused(ws, laughs, "document type declaration", "entity-expansion", seconds=5.0)


def test_damaged_zip_is_a_clear_message(ws, tmp_path):
    path = tmp_path / "broken.xlsx"
    path.write_bytes(b"PK\x03\x04" + b"\x00" * 200)
    _assert_refused(ws, path, "not a readable .xlsx workbook")
