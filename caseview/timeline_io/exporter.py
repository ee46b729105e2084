"""Export stored timelines in the import layout (CSV or XLSX), so import(export(x)) == x.

Text cells that a spreadsheet would treat as a formula (starting with ``=``, ``+``, ``-``, ``@``,
tab or carriage return) are written with a leading apostrophe (OWASP "CSV Injection" guidance);
the importer never accepts such codes, so this only matters for odd model category names.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..dates import days_text
from ..errors import InputError



@dataclass(frozen=True)
class ExportResult:
    file: str
    rows: int
    cases: int
    sha256: str
    audit_head: str
    recorded: bool = True  # False: the workspace was read-only, so no audit entry


def escape_text(values: np.ndarray) -> np.ndarray:
    """Formula-like text cells neutralised (:func:`caseview.cell_text.neutralise`); shape (n,) object."""
    from ..cell_text import neutralise_all

    out = values.astype(object)
    if out.size:
        out = np.array(neutralise_all(out.tolist()) + [None], dtype=object)[:-1]
    return out


def _number_text(column: np.ndarray) -> np.ndarray:
    finite = np.isfinite(column)
    if finite.all() and np.all(column == np.round(column)) and np.all(np.abs(column) < 2**53):
        return column.astype(np.int64).astype(str).astype(object)
    text = column.astype(str).astype(object)
    text[~finite] = ""
    return text


def _contact_kind_text(stored) -> np.ndarray:
    """The ``contact_kind`` column: 'scheduled' or 'unscheduled' per contact (import reads it back)."""
    kinds = np.full(stored.days.shape[0], "scheduled", dtype=object)
    if stored.unscheduled is not None:
        kinds[stored.unscheduled] = "unscheduled"
    return kinds


def timeline_table(ws):
    """The stored timelines as a pandas DataFrame in the import layout (all text cells)."""
    import pandas as pd

    model, _ = ws.current_model()
    stored = ws.stored_contacts()
    counts = np.diff(stored.offsets)
    columns = {
        "case_id": escape_text(np.repeat(stored.case_codes, counts)),
        "date": np.array(days_text(stored.days), dtype=object),
        "coordinator": escape_text(stored.coordinators),
    }
    for channel in model.channels:
        position = stored.layout.channel_position(channel.name)
        text = np.full(256, "", dtype=object)
        if position is not None:
            for code, label in enumerate(stored.layout.channels[position][2]):
                text[code] = label
            columns[channel.name] = escape_text(text[stored.observations[:, position]])
        else:
            columns[channel.name] = np.full(stored.days.shape[0], "", dtype=object)
    for name in model.covariates:
        position = stored.layout.covariate_position(name)
        columns[name] = (_number_text(stored.covariates[:, position]) if position is not None
                         else np.full(stored.days.shape[0], "", dtype=object))
    columns["stage_known"] = escape_text(stored.stage_known)
    columns["contact_kind"] = _contact_kind_text(stored)
    from ..cell_text import neutralise

    table = pd.DataFrame({neutralise(name): values for name, values in columns.items()})
    table.attrs["covariates"] = [neutralise(name) for name in model.covariates]
    return table, int(counts.size)


def export_timelines(ws, out_path, actor: str) -> ExportResult:
    """Write the timelines to ``out_path`` (.csv or .xlsx), record the export, return the chain head.

    The file is written owner-only (0600) to a partial file and moved into place when complete
    (:func:`caseview.private_files.private_output`). On a read-only workspace the export is written
    but cannot be recorded (``ExportResult.recorded`` is False).
    """
    from ..private_files import private_output

    out_path = Path(out_path)
    suffix = out_path.suffix.lower()
    if suffix not in (".csv", ".xlsx"):
        raise InputError(f"{out_path}: expected an output file ending in .csv or .xlsx")
    if not out_path.parent.exists():
        raise InputError(f"{out_path.parent}: folder does not exist")
    if ws.is_own_file(out_path):
        raise InputError(f"{out_path}: this is the workspace file itself; choose another output file")
    table, n_cases = timeline_table(ws)
    recorded = not ws.read_only
    with private_output(out_path) as temporary:
        if suffix == ".csv":
            table.to_csv(temporary, index=False, encoding="utf-8", lineterminator="\n")
        else:
            _write_xlsx(table, temporary)
        digest = hashlib.sha256()
        with open(temporary, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
        head = ws.audit_head()
        if recorded:  # the entry commits just before the file is moved into place
            from ..privacy.file_names import audited_file_name

            name = audited_file_name(out_path.name, digest.hexdigest())
            head = ws.audit_append(actor, "export", name,
                                   {"file": name, "rows": int(len(table)), "cases": n_cases,
                                    "sha256": digest.hexdigest()}).entry_hash
    return ExportResult(str(out_path), int(len(table)), n_cases, digest.hexdigest(), head, recorded)


def _write_xlsx(table, path) -> None:
    from openpyxl import Workbook
    from openpyxl.cell import WriteOnlyCell

    book = Workbook(write_only=True)
    sheet = book.create_sheet("timelines")
    sheet.append(list(table.columns))
    numeric = [c in table.attrs.get("covariates", ()) for c in table.columns]
    for row in table.itertuples(index=False, name=None):
        cells = []
        for is_number, value in zip(numeric, row):
            if value == "":
                cells.append(None)
            elif is_number:
                number = float(value)
                cells.append(int(number) if number.is_integer() and abs(number) < 2**53 else number)
            else:
                cell = WriteOnlyCell(sheet, value=value)
                cell.data_type = "s"  # text, never a formula
                cells.append(cell)
        sheet.append(cells)
    from caseview.private_files import save_workbook

    save_workbook(book, path)  # no traceback from openpyxl on a full disk
