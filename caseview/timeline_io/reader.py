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

    @property
    def label(self) -> str:
        """How messages name the file: its name, not its whole path (the path may name a person's folder)."""
        return self.path.name


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
        raise InputError(f"{path.name}: old Excel .xls files are not read; save it as .xlsx or as CSV (UTF-8)")
    else:
        raise InputError(f"{path.name}: unknown timeline file type {suffix!r}; expected .csv or .xlsx")
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
                            raise InputError(f"{path.name}: the file is UTF-16 text (byte-order mark at byte 0); "
                                             "save it as CSV UTF-8 and import again")
                        if block.startswith((codecs.BOM_UTF32_LE, codecs.BOM_UTF32_BE)):
                            raise InputError(f"{path.name}: the file is UTF-32 text; save it as CSV UTF-8")
                        if block.startswith(b"PK\x03\x04"):
                            raise InputError(f"{path.name}: this is a zip/Excel file, not CSV text; "
                                             "give it the .xlsx extension or save it as CSV")
                    nul = block.find(b"\x00")
                    if nul >= 0:
                        line = _line_at(block[:nul], lines)
                        raise InputError(f"{path.name}: line {line}: NUL byte at byte offset {offset + nul}; the file "
                                         "looks like UTF-16 or binary data, not UTF-8 CSV text")
                    try:
                        decoder.decode(block, final=False)
                    except UnicodeDecodeError as exc:
                        line = _line_at(block[:exc.start], lines)
                        raise InputError(
                            f"{path.name}: line {line}: byte offset {offset + exc.start}: not UTF-8 text "
                            f"(byte 0x{block[exc.start]:02x}); the file is probably in a legacy encoding such as "
                            "Latin-1/Windows-1252 - save it as CSV UTF-8 and import again") from None
                    lines += block.count(b"\n")
                first = False
                offset += len(block)
            if kind == "csv":
                try:
                    decoder.decode(b"", final=True)
                except UnicodeDecodeError:
                    raise InputError(f"{path.name}: byte offset {offset - 1}: the file ends in the middle of a UTF-8 "
                                     "character; save it as CSV UTF-8") from None
    except FileNotFoundError:
        raise InputError(f"{path.name}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{path.name}: is a folder, not a timeline file") from None
    except OSError as exc:
        raise InputError(f"{path.name}: cannot read ({exc.strerror})") from None
    if offset == 0:
        raise InputError(f"{path.name}: the file is empty; expected a header row (case_id, date, ...)")
    return FileFacts(path, kind, digest.hexdigest(), offset, lines)


#: Marks the text of a *number* cell in a case-ID column of a workbook (a spreadsheet may have
#: dropped leading zeros: 0007 -> 7); the case-ID rules in :mod:`.case_ids` decide what to do.
NUMBER_CELL_MARK = "\x00"
_FILL_GAP = 1_000                                  # blank rows filled in; a longer gap starts a chunk
FIRST_SERIAL_DAY, LAST_SERIAL_DAY = 1, 2_958_465   # Excel serial days 1900-01-01 .. 9999-12-31


class TimelineSource:
    """Iterate a timeline file as (header, chunks); ``where(line)`` names a row in messages.

    ``header_row`` is the line (CSV) or sheet row (XLSX) holding the column names; rows above it
    are ignored. Before :meth:`chunks`, the importer may set ``id_columns`` (file column indices
    of case IDs: a workbook's number cells there get :data:`NUMBER_CELL_MARK`) and
    ``date_columns`` (a workbook's plain number cells there are Excel serial day numbers, read as
    dates and counted in ``notes``).
    """

    def __init__(self, facts: FileFacts, chunk_rows: int = CHUNK_ROWS, header_row: int = 1):
        if not isinstance(header_row, int) or header_row < 1:
            raise InputError(f"--header-row {header_row!r}: expected a row number of 1 or more")
        self.facts = facts
        self.chunk_rows = chunk_rows
        self.header_row = header_row
        self.sheet = None
        self.id_columns: frozenset = frozenset()
        self.date_columns: frozenset = frozenset()
        self.date_format: str | None = None
        self.notes: dict = {}
        self._header = None

    def where(self, line: int) -> str:
        return f"line {line}" if self.facts.kind == "csv" else f"sheet {self.sheet!r}, row {line}"

    def _no_header(self) -> InputError:
        return InputError(f"{self.facts.label}: {self.where(self.header_row)}: the header row is empty; expected "
                          "column names (case_id, date, ...)" + ("" if self.header_row > 1 else
                                                                  "; if the names are on a later row, give "
                                                                  "its number with --header-row N"))

    # ---------------------------------------------------------------- CSV
    def header(self) -> list[str]:
        if self._header is None:
            self._header = self._xlsx_header() if self.facts.kind == "xlsx" else self._csv_header()
        return self._header

    def _csv_records(self, count: int) -> list:
        """The first ``count`` records from the header row on (CSV)."""
        out = []
        with open(self.facts.path, encoding="utf-8-sig", newline="") as fh:
            reader = csv.reader(fh)
            try:
                for number, row in enumerate(reader, start=1):
                    if number >= self.header_row:
                        out.append(row)
                        if len(out) >= count:
                            break
            except csv.Error as exc:
                raise InputError(f"{self.facts.label}: line {reader.line_num}: cannot read the CSV structure "
                                 f"({exc})") from None
        return out

    def _csv_header(self) -> list[str]:
        rows = self._csv_records(2)
        row = rows[0] if rows else None
        if not row or not any(cell.strip() for cell in row):
            raise self._no_header()
        if len(rows) > 1 and len(rows[1]) > len(row):
            from .validate import shown

            extra = rows[1][len(row):]
            filled = [i for i, c in enumerate(extra) if c.strip()]
            column = len(row) + (filled[0] if filled else 0) + 1
            value = shown(extra[filled[0]].strip(), "other", "") if filled else "blank"
            raise InputError(f"{self.facts.label}: line {self.header_row + 1}, column {column}: the row has "
                             f"{len(rows[1])} cells but the header has {len(row)} columns (extra cell: {value}); "
                             "check for extra separators (a comma inside a value needs quotes) or a missing "
                             "column name")
        return row

    def chunks(self):
        """Yield ``(first_line, DataFrame of str)``; data start on the line after the header."""
        if self.facts.kind == "xlsx":
            yield from self._xlsx_chunks()
            return
        import pandas as pd

        header = self.header()
        line = self.header_row + 1
        try:
            reader = pd.read_csv(self.facts.path, dtype=str, keep_default_na=False, na_filter=True,
                                 na_values=[], chunksize=self.chunk_rows, encoding="utf-8-sig",
                                 skip_blank_lines=False, engine="c", header=0, names=list(range(len(header))),
                                 skiprows=self.header_row - 1, index_col=False,
                                 quoting=csv.QUOTE_MINIMAL, low_memory=False)
            for frame in reader:
                yield line, frame
                line += len(frame)
        except pd.errors.ParserError as exc:
            text = str(exc)
            raise InputError(f"{self.facts.label}: cannot read the CSV structure: "
                             f"{text.split('C error: ')[-1].strip()} (the header has {len(header)} columns; "
                             "check for extra separators or an unclosed quote)") from None
        except pd.errors.EmptyDataError:
            return
        except UnicodeDecodeError as exc:  # already screened by scan_file; kept as a safety net
            raise InputError(f"{self.facts.label}: not UTF-8 text near byte {exc.start}") from None

    # ---------------------------------------------------------------- XLSX
    def _open_sheet(self):
        from openpyxl import load_workbook

        from .xlsx_safety import check_xlsx_container, is_entity_refusal, ENTITY_MESSAGE

        check_xlsx_container(self.facts.path, self.facts.label)
        try:
            book = load_workbook(self.facts.path, read_only=True, data_only=False)
        except Exception as exc:  # openpyxl raises many types for damaged files
            if is_entity_refusal(exc):
                raise InputError(f"{self.facts.label}: {ENTITY_MESSAGE}") from None
            raise InputError(f"{self.facts.label}: not a readable .xlsx workbook ({type(exc).__name__})") from None
        if not book.worksheets:
            book.close()
            raise InputError(f"{self.facts.label}: the workbook has no sheets")
        sheet = book.worksheets[0]
        self.sheet = sheet.title
        return book, sheet

    def _rows(self, book, sheet):
        """``(row number, cells)`` of the sheet; parse errors become one clear InputError."""
        from .xlsx_safety import ENTITY_MESSAGE, is_entity_refusal, sheet_rows

        try:
            yield from sheet_rows(book, sheet)
        except InputError as exc:
            raise InputError(f"{self.facts.label}: sheet {self.sheet!r}: {exc}") from None
        except Exception as exc:
            if is_entity_refusal(exc):
                raise InputError(f"{self.facts.label}: sheet {self.sheet!r} {ENTITY_MESSAGE}") from None
            raise InputError(f"{self.facts.label}: sheet {self.sheet!r} cannot be read ({type(exc).__name__}); "
                             "save it again from a spreadsheet program or as CSV (UTF-8)") from None

    def _xlsx_header(self) -> list[str]:
        book, sheet = self._open_sheet()
        try:
            for number, cells in self._rows(book, sheet):
                if number < self.header_row:
                    continue
                if number > self.header_row or not cells:
                    break
                header = [""] * max(column for column, _, _ in cells)
                for column, value, _ in cells:
                    header[column - 1] = cell_text(value)
                while header and header[-1] == "":
                    header.pop()
                if header:
                    return header
                break
        finally:
            book.close()
        raise self._no_header()

    def _cell(self, index: int, value, data_type: str, line: int) -> str:
        if data_type == "n" and not isinstance(value, bool):
            if index in self.id_columns:
                return NUMBER_CELL_MARK + cell_text(value)
            if index in self.date_columns:
                return self._serial_date(value, line)
        if index in self.date_columns and isinstance(value, _dt.date):
            return self._date_text(value)
        return cell_text(value)

    def _date_text(self, value) -> str:
        """A workbook date as the date column's text (its time of day, if any, is not part of a contact)."""
        day = value.date() if isinstance(value, _dt.datetime) else value
        return day.strftime(self.date_format) if self.date_format else day.isoformat()

    def _serial_date(self, value, line: int) -> str:
        from openpyxl.utils.datetime import from_excel

        if not (FIRST_SERIAL_DAY <= value <= LAST_SERIAL_DAY + 0.99999):
            return cell_text(value)
        text = self._date_text(from_excel(value, self._epoch))
        note = self.notes.setdefault("serial_dates", [0, f"{cell_text(value)} as {text} ({self.where(line)})"])
        note[0] += 1
        return text

    def _xlsx_chunks(self):
        import pandas as pd

        width = len(self.header())
        book, sheet = self._open_sheet()
        self._epoch = book.epoch
        try:
            rows, first_line, expected = [], self.header_row + 1, self.header_row + 1
            blank = [""] * width
            for line, cells in self._rows(book, sheet):
                if line <= self.header_row:
                    continue
                if line < expected:
                    raise InputError(f"{self.facts.label}: sheet {self.sheet!r}, row {line}: rows are out of "
                                     "order in the file; save it again from a spreadsheet program")
                if line - expected <= _FILL_GAP:  # rows left out of the XML are blank
                    rows.extend([blank] * (line - expected))
                else:  # a long gap starts a new chunk, so line numbers stay right
                    if rows:
                        yield first_line, pd.DataFrame(rows, columns=list(range(width)), dtype=object)
                    rows, first_line = [], line
                expected = line + 1
                row = [""] * width
                for column, value, data_type in cells:
                    if column > width:
                        text = cell_text(value)
                        if text == "":
                            continue
                        from .validate import shown

                        raise InputError(f"{self.facts.label}: sheet {self.sheet!r}, row {line}, column {column}: "
                                         f"a value beyond the {width} header columns "
                                         f"({shown(text, 'other', '')}); delete it or name its column")
                    row[column - 1] = self._cell(column - 1, value, data_type, line)
                rows.append(row)
                if len(rows) >= self.chunk_rows:
                    yield first_line, pd.DataFrame(rows, columns=list(range(width)), dtype=object)
                    first_line += len(rows)
                    rows = []
            if rows:
                yield first_line, pd.DataFrame(rows, columns=list(range(width)), dtype=object)
        finally:
            book.close()


def preview_rows(path, rows: int, header_row: int = 1) -> tuple[list, list]:
    """Header and up to ``rows`` following rows as text (for the import dialog), read with the
    same limits as an import; InputError when the file cannot be read safely."""
    facts = FileFacts(Path(path), "xlsx" if Path(path).suffix.lower() in (".xlsx", ".xlsm") else "csv", "", 0)
    source = TimelineSource(facts, chunk_rows=rows, header_row=header_row)
    if facts.kind == "csv":
        records = source._csv_records(rows + 1)
        return (records[0] if records else []), records[1:]
    header = source.header()
    for _, frame in source.chunks():
        body = frame.head(rows).to_numpy(dtype=object).tolist()
        return header, [[c.lstrip(NUMBER_CELL_MARK) for c in r] for r in body]
    return header, []


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
