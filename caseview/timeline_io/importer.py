"""Strict import of timeline files into a workspace: validate everything, then write all or nothing.

Steps: (1) read the bytes once for the SHA-256 and the encoding check; (2) check the header
(``--map``/``--drop``, unknown and missing columns); (3) validate every chunk (vectorised) and
keep the encoded rows; (4) find duplicates inside the file; (5) in ONE transaction add the rows,
skip exact duplicates of stored contacts, replace conflicting ones only when asked, and record the
import in the audit trail (a check-only import rolls step 5 back and reports what it would have done).
Any problem raises :class:`caseview.errors.InputError` before step 5 or
rolls step 5 back, so the workspace is never half-changed.

Rules worth knowing: cells are stripped of surrounding whitespace; fully blank rows are skipped;
a row with fewer cells than the header reads the missing trailing cells as blank (spreadsheets
trim trailing empty cells), which is an error for covariates and "not observed" for channels;
a row with more cells than the header is an error; channel columns absent from the file mean
"not observed" (a warning says so); covariates are required at every contact (never carried
forward); dates must be real calendar dates YYYY-MM-DD from 1900-01-01 to 2199-12-31. CSV line
numbers count the header as line 1 and assume no quoted cell spans several lines.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..case_checks import contradiction_message, stored_contradictions
from ..dates import day_text
from ..errors import InputError, WorkspaceError
from ..privacy.file_names import audited_file_name
from .reader import CHUNK_ROWS, TimelineSource, scan_file
from .validate import BASE_COLUMNS, ChunkValidator, Problems, Rules


@dataclass(frozen=True)
class ImportResult:
    file: str
    sha256: str
    rows_read: int
    cases_added: int
    contacts_added: int
    duplicates_skipped: int
    replaced: int
    warnings: list = field(default_factory=list)
    audit_id: int | None = None
    check_only: bool = False
    notes: list = field(default_factory=list)   # what was read differently from how it was written


class _RollBack(Exception):
    """Raised inside the write transaction of a check-only import so that it rolls back."""


def _header_name(name: str) -> str:
    """A column name as it may appear in a message: masked when it looks like an identifier."""
    from .. import privacy

    finding = privacy.screen_value(name, "other")
    return repr(name) if finding is None else f"{privacy.mask(name)} (masked: {finding.description})"


def _parse_header(source: TimelineSource, model, mapping: dict, drop) -> tuple[list, list]:
    """Target column name per file column (None = dropped) and warnings; InputError on problems.

    A row none of whose cells (after ``mapping``) is a column caseview knows is probably data, not
    a header: its cells are never repeated in the message (they may be a person's details).
    """
    from ..cell_text import neutralise

    raw = source.header()
    names = [str(h).strip() for h in raw]
    known = {neutralise(n): n for n in ("case_id", "date", "coordinator", *(c.name for c in model.channels),
                                        *model.covariates, "stage_known", "contact_kind")}
    names = [known.get(n, n) if n.startswith("'") else n for n in names]   # headers of caseview's own exports
    problems = Problems(source.facts.label)
    where = source.where(source.header_row)
    channel_names = [c.name for c in model.channels]
    allowed = ["case_id", "date", "coordinator", *channel_names, *model.covariates, "stage_known", "contact_kind"]
    provided = {mapping.get(n, n) for n in names if n not in set(drop or ())}
    if not (provided & set(allowed)):
        raise InputError(
            f"{source.facts.label}: {where}: does not look like a header row (none of its {len(names)} cells is "
            "a column name caseview knows; they are not repeated here in case they hold a person's details); the file "
            "needs a row of column names (case_id, date, ...) - if they are on a later row, give its number "
            "with --header-row N; if they are named differently, use --map SOURCE=TARGET")
    seen = {}
    for i, name in enumerate(names):
        if name == "":
            problems.add(where, None, f"column {i + 1} has no name; name it or delete the column")
        elif name in seen:
            problems.add(where, name, f"the column name appears twice (columns {seen[name] + 1} and {i + 1})")
        seen.setdefault(name, i)
    listed = ", ".join(_header_name(n) for n in names)
    for source_name in mapping:
        if source_name not in seen:
            problems.add(where, None, f"--map {source_name}=...: no column {source_name!r} in the file "
                                      f"(columns: {listed})")
    drop = set(drop or ())
    for name in drop:
        if name not in seen:
            problems.add(where, None, f"--drop {name}: no column {name!r} in the file (columns: {listed})")
    targets = []
    for name in names:
        if name in drop:
            targets.append(None)
            continue
        target = mapping.get(name, name)
        targets.append(target)
    counts = {}
    for i, target in enumerate(targets):
        if target is None or target == "":
            continue
        if target in counts:
            problems.add(where, names[i], f"maps to {target!r}, which another column already provides")
        counts[target] = i
        if target not in allowed:
            hint = ""
            try:
                from .. import privacy

                finding = privacy.screen_column_name(target)
                if finding is not None:
                    hint = (f" - the name suggests {finding.description} (identifier rule {finding.rule}); "
                            "caseview never stores direct identifiers")
            except ImportError:
                pass
            problems.add(where, None, f"column {i + 1} {_header_name(names[i])}: unknown column{hint}; expected: "
                                      f"{', '.join(allowed)} (rename with --map SOURCE=TARGET or leave out with "
                                      "--drop COLUMN)")
    for required in ("case_id", "date", *model.covariates):
        if required not in counts:
            problems.add(where, None, f"required column {required!r} is missing "
                                      f"(file columns: {', '.join(_header_name(n) for n in names if n) or 'none'})")
    problems.raise_if_any()
    warnings = [f"{source.facts.label}: no column for channel {c!r}; every contact records it as not observed"
                for c in channel_names if c not in counts]
    return targets, warnings


def _duplicates_in_file(data: dict, problems: Problems, where) -> np.ndarray:
    """Rows to keep (first of each exact duplicate); conflicting duplicates become problems."""
    import pandas as pd

    n = data["days"].shape[0]
    keep = np.ones(n, dtype=bool)
    if n < 2:
        return keep
    case_index, _ = pd.factorize(data["case_codes"])
    key = case_index.astype(np.int64) * (1 << 18) + (data["days"] + (1 << 17))
    order = np.argsort(key, kind="stable")
    sorted_key = key[order]
    same = np.flatnonzero(sorted_key[1:] == sorted_key[:-1])
    if same.size == 0:
        return keep
    # compare each duplicate row with the first row of its key
    first_of_key = np.searchsorted(sorted_key, sorted_key[same + 1], side="left")
    later, first = order[same + 1], order[first_of_key]
    equal = np.ones(same.size, dtype=bool)
    for name in ("coordinators", "stage_known"):
        equal &= data[name][later] == data[name][first]
    equal &= (data["channel_values"][later] == data["channel_values"][first]).all(axis=1)
    equal &= (data["covariates"][later] == data["covariates"][first]).all(axis=1)
    equal &= data["unscheduled"][later] == data["unscheduled"][first]
    keep[later] = False
    for a, b in zip(first[~equal].tolist(), later[~equal].tolist()):
        problems.add(where(int(data["lines"][b])), None,
                     f"case {data['case_codes'][b]!r} has a second contact on "
                     f"{day_text(data['days'][b])} with different values (first at "
                     f"{where(int(data['lines'][a]))}); keep one row per case and date")
    return keep


def _refuse_contacts_after_entry(ws, model, data: dict, problems: Problems, where) -> None:
    """Inside the write transaction: refuse contacts after a recorded entry into an absorbing stage.

    Runs on the stored contacts (this file's rows included) of the cases that record an
    exact-entry stage, so a file row that contradicts a stored record, or a stored contact that a
    new entry record contradicts, is found too; raising rolls the whole import back.
    """
    found = stored_contradictions(ws.connection, model, np.unique(data["case_codes"]))
    if not found:
        return
    file_line = {(c, int(d)): int(line) for c, d, line in
                 zip(data["case_codes"].tolist(), data["days"].tolist(), data["lines"].tolist())}

    def named(code, day):
        line = file_line.get((code, day))
        date = np.datetime64(day, "D")
        return (f"line {line}", line) if line is not None else (f"the stored contact of {date}", None)

    for c in found:
        later, later_line = named(c.case_id, c.day)
        earlier, earlier_line = named(c.case_id, c.entry_day)
        line = later_line if later_line is not None else earlier_line
        problems.add(where(line), None, line=line, message=contradiction_message(
            c, later, earlier, "correct the date or the stage, or leave the row out"))
    problems.raise_if_any("nothing was imported")


def import_timelines(ws, path, actor: str, mapping: dict | None = None, drop=(), replace: bool = False,
                     chunk_rows: int = CHUNK_ROWS, progress=None, check_only: bool = False,
                     date_format: str | None = None, header_row: int = 1) -> ImportResult:
    """Import a CSV/XLSX timeline file into ``ws`` (all rows or none).

    Parameters
    ----------
    ws : caseview.storage.Workspace
    path : path of the file (.csv or .xlsx)
    actor : name recorded in the audit trail (attribution, not authentication)
    mapping : {source column: target column}
    drop : file columns to leave out
    replace : replace stored contacts of the same case and date that differ (audited)
    progress : callable(fraction) or None; raising from it cancels (nothing written)
    check_only : run every check, including the comparison with stored contacts, and report what an
        import would add, skip and replace, but roll the write back: nothing is stored or audited
    date_format : ``strptime`` format of the date column (e.g. ``"%d/%m/%Y"``); default YYYY-MM-DD.
        Date cells of a workbook are read as dates, and plain numbers in its date column as Excel
        serial day numbers (both reported in ``notes``)
    header_row : the line (CSV) or sheet row (XLSX) with the column names; rows above it are ignored

    Case IDs follow :mod:`caseview.timeline_io.case_ids` (normalised, matched ignoring letter case,
    near matches warned); categories are matched ignoring letter case and surrounding spaces. What
    was read differently from how it was written is listed in ``ImportResult.notes``.
    """
    from ..storage import ContactBatch, ContactConflicts

    report = progress or (lambda fraction: None)
    report(0.0)
    from ..textfiles import check_one_line
    from ..storage.contacts import stored_case_codes
    from ..storage.case_lookup import stored_coordinator_codes
    from .case_ids import CaseIdBook, CoordinatorBook
    from .dates import check_date_format

    check_one_line(actor, "the name recorded in the audit trail (--by)")
    date_format = check_date_format(date_format)
    if ws.is_own_file(path):  # reading it with open() would drop this process's SQLite locks on it
        raise InputError(f"{Path(path).name}: this is the workspace file itself, not a timeline file; "
                         "nothing was imported")
    facts = scan_file(path)
    report(0.05)
    model, version = ws.current_model()
    source = TimelineSource(facts, chunk_rows, header_row=header_row)
    targets, warnings = _parse_header(source, model, dict(mapping or {}), drop)
    source.id_columns = frozenset(i for i, t in enumerate(targets) if t == "case_id")
    source.date_columns = frozenset(i for i, t in enumerate(targets) if t == "date")
    source.date_format = date_format
    rules = Rules(channels={c.name: tuple(c.categories) for c in model.channels}, covariates=tuple(model.covariates),
                  stages=tuple(model.stages), present=tuple(targets), date_format=date_format,
                  covariate_ranges=model.range_of)
    problems = Problems(facts.label)
    book = CaseIdBook(stored_case_codes(ws.connection))
    coordinator_book = CoordinatorBook(stored_coordinator_codes(ws.connection))
    validator = ChunkValidator(rules, problems, source.where, book, coordinator_book)
    parts = []
    rows_read = 0
    for first_line, frame in source.chunks():
        rows_read += len(frame)
        encoded = validator.validate(first_line, frame)
        if encoded is not None and not problems.count:
            parts.append(encoded)
        elif problems.count:
            parts = []  # keep validating for messages, stop keeping rows
        expected_rows = max(facts.lines, rows_read, 1)
        report(0.05 + 0.65 * min(1.0, rows_read / expected_rows))
    for line, message in book.number_cell_problems():
        problems.add(source.where(line), "case_id", message, line)
    problems.raise_if_any()
    if not parts:
        raise InputError(f"{facts.label}: no contact rows after the header; nothing was imported")
    notes = book.notes(facts.label) + coordinator_book.notes(facts.label) + validator.category_notes(facts.label)
    if "serial_dates" in source.notes:
        count, example = source.notes["serial_dates"]
        notes.append(f"{facts.label}: read {count:,} Excel day number{'s' if count != 1 else ''} in the date column "
                     f"as dates (e.g. {example})")
    data = {name: np.concatenate([getattr(p, name) for p in parts]) for name in
            ("lines", "case_codes", "days", "coordinators", "channel_values", "covariates", "stage_known",
             "unscheduled")}
    del parts
    keep = _duplicates_in_file(data, problems, source.where)
    problems.raise_if_any()
    in_file_duplicates = int((~keep).sum())
    if in_file_duplicates:
        data = {k: v[keep] for k, v in data.items()}
    batch = ContactBatch(
        case_codes=data["case_codes"], days=data["days"], coordinators=data["coordinators"],
        channel_names=tuple(rules.channels), channel_categories=tuple(rules.channels.values()),
        channel_values=data["channel_values"], covariate_names=rules.covariates, covariates=data["covariates"],
        stage_known=data["stage_known"], unscheduled=data["unscheduled"])
    report(0.75)
    try:
        with ws.transaction():
            _, now_version = ws.current_model()
            if now_version.id != version.id:
                raise WorkspaceError("the current model changed while the file was being checked; import again")
            file_name = audited_file_name(facts.path.name, facts.sha256)
            counts = ws.write_contacts(batch, replace=replace, actor=actor,
                                       reason=f"replaced by the import of {file_name}")
            _refuse_contacts_after_entry(ws, model, data, problems, source.where)
            details = {"file": file_name, "sha256": facts.sha256, "bytes": facts.size, "rows_read": rows_read,
                       "cases_added": counts.cases_added, "contacts_added": counts.contacts_added,
                       "duplicates_skipped": counts.duplicates_skipped + in_file_duplicates,
                       "replaced": counts.replaced, "model_version": version.id,
                       "mapping": dict(mapping or {}), "dropped": sorted(drop or ()), **book.audit_details()}
            if date_format is not None or header_row != 1:
                details["options"] = {"date_format": date_format, "header_row": header_row}
            if counts.replaced:
                details["replaced_contacts"] = counts.replaced_details
                details["case_ids"] = sorted({d["case_id"] for d in counts.replaced_details})
            if check_only:
                raise _RollBack()
            entry = ws.audit_append(actor, "import.replace" if counts.replaced else "import", file_name, details,
                                    changes=counts.row_changes)
    except _RollBack:
        entry = None
    except ContactConflicts as conflict:
        for i, names in zip(conflict.rows, conflict.differing):
            problems.add(source.where(int(data["lines"][i])), None,
                         f"case {data['case_codes'][i]!r} already has a contact on "
                         f"{day_text(data['days'][i])} with different {', '.join(names)}; "
                         "use --replace to replace stored contacts (audited) or correct the row")
        problems.raise_if_any("nothing was imported")
        raise
    report(1.0)
    return ImportResult(file=str(facts.path), sha256=facts.sha256, rows_read=rows_read,
                        cases_added=counts.cases_added, contacts_added=counts.contacts_added,
                        duplicates_skipped=counts.duplicates_skipped + in_file_duplicates,
                        replaced=counts.replaced, warnings=warnings, audit_id=entry.id if entry else None,
                        check_only=check_only, notes=notes)
