"""Opening .xlsx workbooks without trusting them: size limits before parsing, rows streamed as parsed.

An .xlsx file is a zip archive of XML parts. A small hostile file can expand to gigabytes (a
"zip bomb"), declare a sheet size of 16,384 columns x 1,048,576 rows that a reader then pads every
row to, or carry XML entity declarations that expand exponentially ("billion laughs"). Before
openpyxl sees the file, :func:`check_xlsx_container` reads only the zip's central directory and
refuses a workbook that breaks any of these limits (the numbers are this program's choices, far
above what a timeline of a million contacts needs; common practice, no source):

* at most :data:`MAX_ENTRIES` parts in the archive;
* uncompressed size per part: a worksheet at most :data:`MAX_SHEET_BYTES`, the shared-string
  table (read whole into memory) at most :data:`MAX_SHARED_STRINGS_BYTES`, any other part at
  most :data:`MAX_OTHER_PART_BYTES`; all parts together at most :data:`MAX_TOTAL_BYTES`;
* compression ratio (uncompressed / compressed) at most :data:`MAX_RATIO` for any part larger
  than :data:`RATIO_FLOOR_BYTES` (real sheets compress about 5-30 times; deflate allows ~1000);
* no XML part may start with a document type declaration (``<!DOCTYPE``/``<!ENTITY``): spreadsheet
  programs never write one, and it is how entity-expansion attacks begin. If one hides further
  in, openpyxl's parser (defusedxml, installed with caseview) refuses it and the message is the same.

The declared sizes bound what is decompressed: Python's zipfile stops at a part's declared size.
:func:`sheet_rows` then streams the first worksheet's rows as they are parsed, with their real
row and column numbers (no padding to a declared sheet size), refusing a row number above
1,048,576 or a column above 16,384 (Excel's own sheet limits).
"""

from __future__ import annotations

import zipfile

from ..errors import InputError

MAX_ENTRIES = 1_000
MAX_SHEET_BYTES = 1 << 30            # 1 GiB of worksheet XML (about 3 million rows of 10 columns)
MAX_SHARED_STRINGS_BYTES = 256 << 20
MAX_OTHER_PART_BYTES = 32 << 20
MAX_TOTAL_BYTES = 2 << 30
MAX_RATIO = 200
RATIO_FLOOR_BYTES = 1 << 20
MAX_ROW = 1_048_576                  # Excel's sheet limits
MAX_COLUMN = 16_384
_PROLOG_BYTES = 1 << 16

ENTITY_MESSAGE = ("contains an XML document type declaration (<!DOCTYPE>/<!ENTITY>), which spreadsheet "
                  "programs never write and which entity-expansion attacks use; the file was not read - "
                  "open it in a spreadsheet program and save it again as .xlsx, or save it as CSV (UTF-8)")


def _size_limit(name: str) -> int:
    lower = name.lower()
    if lower.startswith("xl/worksheets/") and lower.endswith(".xml"):
        return MAX_SHEET_BYTES
    if lower.endswith("sharedstrings.xml"):
        return MAX_SHARED_STRINGS_BYTES
    return MAX_OTHER_PART_BYTES


def _mib(n: int) -> str:
    return f"{n / (1 << 20):,.0f} MiB" if n >= (1 << 20) else f"{n:,} bytes"


def check_xlsx_container(path, label: str) -> None:
    """Refuse a workbook whose zip directory breaks a limit of the module docstring.

    Reads the central directory and the first 64 KiB of each XML part, nothing more.

    Raises
    ------
    InputError
        Not a zip archive, too many parts, a part too large or too compressed, or a DTD.
    """
    try:
        archive = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise InputError(f"{label}: not a readable .xlsx workbook ({exc})") from None
    with archive:
        entries = archive.infolist()
        if len(entries) > MAX_ENTRIES:
            raise InputError(f"{label}: the workbook holds {len(entries):,} parts (at most {MAX_ENTRIES:,} "
                             "are read); it is not an ordinary spreadsheet - save the sheet as CSV (UTF-8)")
        total = 0
        for entry in entries:
            limit = _size_limit(entry.filename)
            if entry.file_size > limit:
                raise InputError(f"{label}: part {entry.filename[:80]!r} unpacks to {_mib(entry.file_size)} "
                                 f"(at most {_mib(limit)} is read); save the sheet as CSV (UTF-8) instead")
            total += entry.file_size
            if total > MAX_TOTAL_BYTES:
                raise InputError(f"{label}: the workbook unpacks to more than {_mib(MAX_TOTAL_BYTES)}; "
                                 "save the sheet as CSV (UTF-8) instead")
            if entry.file_size > RATIO_FLOOR_BYTES:
                ratio = entry.file_size / max(entry.compress_size, 1)
                if ratio > MAX_RATIO:
                    raise InputError(f"{label}: part {entry.filename[:80]!r} is compressed {ratio:,.0f} to 1 "
                                     f"(at most {MAX_RATIO} to 1 is read; real spreadsheets compress far less); "
                                     "the file looks like a zip bomb and was not read")
        for entry in entries:
            if not entry.filename.lower().endswith((".xml", ".rels")):
                continue
            try:
                with archive.open(entry) as part:
                    prolog = part.read(_PROLOG_BYTES)
            except (zipfile.BadZipFile, OSError, ValueError, NotImplementedError, RuntimeError) as exc:
                raise InputError(f"{label}: part {entry.filename[:80]!r} cannot be unpacked ({exc})") from None
            if b"<!DOCTYPE" in prolog or b"<!ENTITY" in prolog:
                raise InputError(f"{label}: part {entry.filename[:80]!r} {ENTITY_MESSAGE}")


def is_entity_refusal(exc: BaseException) -> bool:
    """True for the errors XML parsers raise on entity declarations or entity expansion."""
    name = type(exc).__name__
    text = str(exc).lower()
    return name in ("EntitiesForbidden", "DTDForbidden", "ExternalReferenceForbidden") or \
        "amplification" in text or "entity" in text


def sheet_rows(book, sheet):
    """Yield ``(row_number, cells)`` of a read-only worksheet as parsed, where ``cells`` is a list of
    ``(column_number, value, data_type)`` (openpyxl's data types: ``n`` number, ``s`` text, ``d``
    date, ``b`` boolean, ``f`` formula, ``e`` error).

    Rows missing from the XML are not yielded (they are blank). Uses openpyxl's worksheet parser
    (``openpyxl.worksheet._reader.WorkSheetParser``, the one its read-only sheets use) so a declared
    sheet size never pads rows.
    """
    from openpyxl.worksheet._reader import WorkSheetParser

    with sheet._get_source() as source:
        parser = WorkSheetParser(source, sheet._shared_strings, data_only=book.data_only, epoch=book.epoch,
                                 date_formats=book._date_formats, timedelta_formats=book._timedelta_formats)
        for number, cells in parser.parse():
            if number > MAX_ROW:
                raise InputError(f"row number {number:,} is beyond a spreadsheet's last row ({MAX_ROW:,})")
            out = []
            for cell in cells:
                column = cell["column"]
                if column > MAX_COLUMN or column < 1:
                    raise InputError(f"row {number}: a cell in column {column:,}, beyond a spreadsheet's last "
                                     f"column ({MAX_COLUMN:,})")
                if cell["value"] is not None:
                    out.append((column, cell["value"], cell["data_type"]))
            yield number, out
