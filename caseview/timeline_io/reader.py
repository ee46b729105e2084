"""Reading timeline files in chunks of text cells: CSV (UTF-8, with or without BOM) and XLSX.

Every chunk is a ``pandas.DataFrame`` of ``str`` cells (no NA conversion) plus the source line
of its first row, so that messages can name the line (CSV: physical record number counting the
header as line 1; XLSX: the sheet row).
"""

from __future__ import annotations

import codecs
import csv
import datetime as _dt
import hashlib
import io
import math
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError

CHUNK_ROWS = 200_000
_BLOCK = 1 << 20


@dataclass(frozen=True)
class FileFacts:
    path: Path
    kind: str          # "csv" or "xlsx"
    sha256: str
    size: int
    lines: int = 0     # newline count of a CSV file (0 for XLSX): an upper bound on the rows


def _line_at(data_before: bytes, lines_before: int) -> int:
    return lines_before + data_before.count(b"\n") + 1


def scan_file(path) -> FileFacts:
    """SHA-256 of the bytes; for CSV also check the encoding (UTF-8, optional BOM) and NUL bytes."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm"):
        kind = "xlsx"
    elif suffix in (".csv", ".txt", ""):
        kind = "csv"
    elif suffix == ".xls":
        raise InputError(f"{path}: old Excel .xls files are not read; save it as .xlsx or as CSV (UTF-8)")
    else:
        raise InputError(f"{path}: unknown timeline file type {suffix!r}; expected .csv or .xlsx")
    digest = hashlib.sha256()
    decoder = codecs.getincrementaldecoder("utf-8")("strict")
    offset = 0
    lines = 0
    try:
        with open(path, "rb") as fh:
            first = True
            while True:
                block = fh.read(_BLOCK)
                if not block:
                    break
                digest.update(block)
                if kind == "csv":
                    if first:
                        if block.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
                            raise InputError(f"{path}: the file is UTF-16 text (byte-order mark at byte 0); "
                                             "save it as CSV UTF-8 and import again")
                        if block.startswith((codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE)):
                            raise InputError(f"{path}: the file is UTF-32 text; save it as CSV UTF-8")
                        if block.startswith(b"PK\x03\x04"):
                            raise InputError(f"{path}: this is a zip/Excel file, not CSV text; "
                                             "give it the .xlsx extension or save it as CSV")
                    nul = block.find(b"\x00")
                    if nul >= 0:
                        line = _line_at(block[:nul], lines)
                        raise InputError(f"{path}: line {line}: NUL byte at byte offset {offset + nul}; the file "
                                         "looks like UTF-16 or binary data, not UTF-8 CSV text")
                    try:
                        decoder.decode(block, final=False)
                    except UnicodeDecodeError as exc:
                        line = _line_at(block[:exc.start], lines)
                        raise InputError(
                            f"{path}: line {line}: byte offset {offset + exc.start}: not UTF-8 text "
                            f"(byte 0x{block[exc.start]:02x}); the file is probably in a legacy encoding such as "
                            "Latin-1/Windows-1252 - save it as CSV UTF-8 and import again") from None
                    lines += block.count(b"\n")
                first = False
                offset += len(block)
            if kind == "csv":
                try:
                    decoder.decode(b"", final=True)
                except UnicodeDecodeError:
                    raise InputError(f"{path}: byte offset {offset - 1}: the file ends in the middle of a UTF-8 "
                                     "character; save it as CSV UTF-8") from None
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not a timeline file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    if offset == 0:
        raise InputError(f"{path}: the file is empty; expected a header row (case_id, date, ...)")
    return FileFacts(path, kind, digest.hexdigest(), offset, lines)


class TimelineSource:
    """Iterate a timeline file as (header, chunks); ``where(line)`` names a row in messages."""

    def __init__(self, facts: FileFacts, chunk_rows: int = CHUNK_ROWS):
        self.facts = facts
        self.chunk_rows = chunk_rows
        self.sheet = None

    def where(self, line: int) -> str:
        return f"line {line}" if self.facts.kind == "csv" else f"sheet {self.sheet!r}, row {line}"

    # ---------------------------------------------------------------- CSV
    def header(self) -> list[str]:
        if self.facts.kind == "xlsx":
            return self._xlsx_header()
        with open(self.facts.path, encoding="utf-8-sig", newline="") as fh:
            try:
                row = next(csv.reader(fh), None)
            except csv.Error as exc:
                raise InputError(f"{self.facts.path}: line 1: cannot read the header ({exc})") from None
        if not row or not any(cell.strip() for cell in row):
            raise InputError(f"{self.facts.path}: line 1: the header row is empty; expected column names "
                             "(case_id, date, ...)")
        return row

    def chunks(self):
        """Yield ``(first_line, DataFrame of str)``; header = line 1 (CSV) / row 1 (XLSX)."""
        if self.facts.kind == "xlsx":
            yield from self._xlsx_chunks()
            return
        import pandas as pd

        header = self.header()
        line = 2
        try:
            reader = pd.read_csv(self.facts.path, dtype=str, keep_default_na=False, na_filter=True,
                                 na_values=[], chunksize=self.chunk_rows, encoding="utf-8-sig",
                                 skip_blank_lines=False, engine="c", header=0, names=list(range(len(header))),
                                 quoting=csv.QUOTE_MINIMAL, low_memory=False)
            for frame in reader:
                yield line, frame
                line += len(frame)
        except pd.errors.ParserError as exc:
            text = str(exc)
            raise InputError(f"{self.facts.path}: cannot read the CSV structure: {text.split('C error: ')[-1].strip()} "
                             f"(the header has {len(header)} columns; check for extra separators or an unclosed "
                             "quote)") from None
        except pd.errors.EmptyDataError:
            return
        except UnicodeDecodeError as exc:  # already screened by scan_file; kept as a safety net
            raise InputError(f"{self.facts.path}: not UTF-8 text near byte {exc.start}") from None

    # ---------------------------------------------------------------- XLSX
    def _open_sheet(self):
        import zipfile

        from openpyxl import load_workbook

        try:
            book = load_workbook(self.facts.path, read_only=True, data_only=False)
        except (zipfile.BadZipFile, KeyError, OSError, ValueError, TypeError) as exc:
            raise InputError(f"{self.facts.path}: not a readable .xlsx workbook ({type(exc).__name__}: {exc})") from None
        except Exception as exc:  # openpyxl raises its own types for damaged files
            raise InputError(f"{self.facts.path}: not a readable .xlsx workbook ({type(exc).__name__})") from None
        if not book.worksheets:
            raise InputError(f"{self.facts.path}: the workbook has no sheets")
        sheet = book.worksheets[0]
        self.sheet = sheet.title
        return book, sheet

    def _xlsx_header(self) -> list[str]:
        book, sheet = self._open_sheet()
        try:
            for row in sheet.iter_rows(min_row=1, max_row=1, values_only=True):
                header = [cell_text(v) for v in row]
                while header and header[-1] == "":
                    header.pop()
                if header:
                    return header
        finally:
            book.close()
        raise InputError(f"{self.facts.path}: sheet {self.sheet!r}, row 1: the header row is empty; expected "
                         "column names (case_id, date, ...)")

    def _xlsx_chunks(self):
        import pandas as pd

        width = len(self._xlsx_header())
        book, sheet = self._open_sheet()
        try:
            rows, first_line = [], 2
            for line, row in enumerate(sheet.iter_rows(values_only=True), start=1):
                if line == 1:  # the header row
                    continue
                cells = [cell_text(v) for v in row]
                extra = [c for c in cells[width:] if c != ""]
                if extra:
                    raise InputError(f"{self.facts.path}: sheet {self.sheet!r}, row {line}: has values beyond "
                                     f"the {width} header columns ({extra[0][:40]!r})")
                rows.append((cells + [""] * width)[:width])
                if len(rows) >= self.chunk_rows:
                    yield first_line, pd.DataFrame(rows, columns=list(range(width)), dtype=object)
                    first_line += len(rows)
                    rows = []
            if rows:
                yield first_line, pd.DataFrame(rows, columns=list(range(width)), dtype=object)
        finally:
            book.close()


def cell_text(value) -> str:
    """Text of an XLSX cell: numbers without a spurious '.0', dates as YYYY-MM-DD."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "1" if value else "0"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isfinite(value) and value.is_integer() and abs(value) < 2**53:
            return str(int(value))
        return repr(value)
    if isinstance(value, _dt.datetime):
        if value.time() == _dt.time(0, 0):
            return value.date().isoformat()
        return value.isoformat(sep=" ")
    if isinstance(value, _dt.date):
        return value.isoformat()
    return str(value)
