"""Workspace commands: ``init``, ``import``, ``export``, ``backup``, ``audit verify|show``, ``check``.

The actor recorded in the audit trail is the operating-system user (``getpass.getuser()``) unless
``--by NAME`` is given. This is attribution, not authentication: caseview does not check who
anyone is; protect the workspace file with the operating system's permissions.
"""

from __future__ import annotations

import sys


from .options import actor_name as _actor
from .options import add_actor_option
from .basic import open_workspace as _open


def register(subparsers) -> None:
    p = subparsers.add_parser("init", help="create a new workspace file with a stage model",
                              description="Create a new workspace (one SQLite file at any path, or an empty PostgreSQL "
                                          "database given as postgresql://[user@]host[:port]/dbname) with "
                                          "MODEL.json as its first model, or a model built from a staff-estimate "
                                          "file. Refuses an existing file or a database that is not empty.")
    p.add_argument("workspace", metavar="WS")
    first = p.add_mutually_exclusive_group(required=True)
    first.add_argument("--model", metavar="MODEL.json", help="a stage-model file")
    first.add_argument("--estimates", metavar="ESTIMATES.json",
                       help="a staff-estimate file (typical stays, next stages, how often checks are wrong); "
                            "see 'caseview model-from-estimates'")
    add_actor_option(p)
    p.set_defaults(run=run_init)

    p = subparsers.add_parser("import", help="import case timelines from CSV or XLSX (all rows or none)",
                              description="Validate the whole file against the current model, then store every "
                                          "row in one transaction, or nothing if anything is wrong.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("file", metavar="FILE.csv|FILE.xlsx")
    p.add_argument("--map", action="append", default=[], metavar="SOURCE=TARGET",
                   help="read file column SOURCE as TARGET (repeatable)")
    p.add_argument("--drop", action="append", default=[], metavar="COLUMN", help="leave out a file column (repeatable)")
    p.add_argument("--replace", action="store_true",
                   help="replace stored contacts of the same case and date that differ (audited)")
    p.add_argument("--check", action="store_true",
                   help="check the whole file (and clashes with stored contacts) and say what an import would do; "
                        "store nothing")
    p.add_argument("--date-format", metavar="FORMAT",
                   help="how the date column is written, as a strptime format, e.g. %%d/%%m/%%Y "
                        "(default YYYY-MM-DD; date cells of a workbook are always read as dates)")
    p.add_argument("--header-row", type=int, default=1, metavar="N",
                   help="the row holding the column names (default 1); rows above it are ignored")
    add_actor_option(p)
    p.set_defaults(run=run_import)

    p = subparsers.add_parser("export", help="export the timelines in the import layout (CSV or XLSX)")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--out", required=True, metavar="FILE.csv|FILE.xlsx")
    add_actor_option(p)
    p.set_defaults(run=run_export)

    p = subparsers.add_parser("backup", help="copy the workspace safely (SQLite online backup)")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("destination", metavar="DEST")
    add_actor_option(p)
    p.set_defaults(run=run_backup)

    p = subparsers.add_parser("audit", help="check or show the tamper-evident audit trail")
    audit_sub = p.add_subparsers(dest="audit_command", metavar="verify|show", parser_class=type(p))
    v = audit_sub.add_parser("verify", help="recompute the hash chain and check every record against it; "
                                            "non-zero exit names the first bad entry or record")
    v.add_argument("workspace", metavar="WS")
    v.add_argument("--head", metavar="HASH", help="a chain head kept elsewhere (printed by an earlier command or "
                                                  "report): say whether the trail still contains it")
    v.set_defaults(run=run_audit_verify)
    s = audit_sub.add_parser("show", help="list audit entries")
    s.add_argument("workspace", metavar="WS")
    s.add_argument("--case", metavar="ID", help="only entries about this case")
    s.add_argument("--since", metavar="YYYY-MM-DD", help="only entries on or after this date (UTC)")
    s.set_defaults(run=run_audit_show)
    p.set_defaults(run=lambda args: (p.print_help(), 2)[1])

    p = subparsers.add_parser("check", help="check a workspace: SQLite integrity, the full audit verification "
                                            "and the packed contacts",
                              description="Run SQLite's integrity check and the audit verification (hash chain and "
                                          "every record against the trail) and compare the packed contacts with "
                                          "the stored ones; print a short report. Exit 0 when all "
                                          "is well, 4 on any problem. Reads only (works on a read-only file).")
    p.add_argument("workspace", metavar="WS")
    p.set_defaults(run=run_check)


def run_init(args) -> int:
    from pathlib import Path

    from caseview.storage import Workspace
    from caseview.textfiles import read_utf8_text

    if args.estimates:
        from caseview.modelfile import dump_model
        from caseview.staff_estimates_file import model_from_estimates_file

        model = model_from_estimates_file(args.estimates)  # names the estimate file in any message
        text = dump_model(model, extra={"note": f"built from staff estimates in {Path(args.estimates).name}"})
    else:
        from caseview.modelfile import parse_model

        path = Path(args.model)
        text = read_utf8_text(path, "model file")
        parse_model(text, source=str(path))  # names the model file in any message
    with Workspace.create(args.workspace, text, _actor(args)) as ws:
        for warning in ws.warnings:
            print(f"caseview: warning: {warning}", file=sys.stderr)
        model, version = ws.current_model()
        print(f"created workspace {ws.path} with model version {version.id} ({model.name})")
        print(f"audit chain head: {ws.audit_head()}")
    return 0


def _mapping(pairs) -> dict:
    from caseview.errors import InputError

    out = {}
    for pair in pairs:
        source, sep, target = pair.partition("=")
        if not sep or not source.strip() or not target.strip():
            raise InputError(f"--map {pair!r}: expected SOURCE=TARGET, e.g. --map ClientRef=case_id")
        out[source.strip()] = target.strip()
    return out


def run_import(args) -> int:
    from pathlib import Path

    from caseview.timeline_io import import_timelines

    mapping = _mapping(args.map)
    with _open(args.workspace) as ws:
        result = import_timelines(ws, args.file, _actor(args), mapping=mapping, drop=args.drop, replace=args.replace,
                                  check_only=args.check, date_format=args.date_format, header_row=args.header_row)
        for warning in result.warnings:
            print(f"caseview: warning: {warning}", file=sys.stderr)
        for note in result.notes:
            print(f"caseview: note: {note}", file=sys.stderr)
        if result.check_only:
            print(f"checked {Path(result.file).name} (sha256 {result.sha256}, {result.rows_read} rows read): every row is valid; "
                  "nothing was stored")
            verb = "would be "
        else:
            print(f"imported {Path(result.file).name} (sha256 {result.sha256}, {result.rows_read} rows read)")
            verb = ""
        print(f"cases {verb}added: {result.cases_added}")
        print(f"contacts {verb}added: {result.contacts_added}")
        print(f"exact duplicates {verb}skipped: {result.duplicates_skipped}")
        print(f"{verb}replaced: {result.replaced}")
    return 0


def run_export(args) -> int:
    from caseview.timeline_io import export_timelines

    with _open(args.workspace) as ws:
        result = export_timelines(ws, args.out, _actor(args))
        if not result.recorded:
            print(f"caseview: warning: {ws.path} is read-only, so this export is not recorded in its audit trail",
                  file=sys.stderr)
        print(f"exported {result.rows} contacts of {result.cases} cases to {result.file} (sha256 {result.sha256})")
        print(f"audit chain head: {result.audit_head}")
    return 0


def run_backup(args) -> int:
    with _open(args.workspace) as ws:
        dest = ws.backup(args.destination, actor=_actor(args))
        print(f"backed up {ws.path} to {dest}")
        print(f"audit chain head: {ws.audit_head()}")
    return 0


def run_audit_verify(args) -> int:
    with _open(args.workspace) as ws:
        result = ws.audit_verify()
        position = ws.audit_position(args.head) if args.head else None
    if not result.ok:
        print(f"caseview: error: {_problem(result)}", file=sys.stderr)
        return 4
    print(f"audit trail intact: {result.n_entries} entries; chain head {result.head_hash}")
    if result.rows_checked:
        print(f"records checked against the trail: {result.n_records} (all match)")
    else:  # a team workspace's auditor reads the trail, not the cases
        print("records not checked: your role reads the audit trail only (the owner or a supervisor runs the full "
              "check)")
    if position is None:
        return 0
    found, newest = position
    if found is None:
        print(f"caseview: error: the given head {args.head.strip()} is not in this audit trail (the history was "
              "rewritten, or the head comes from another workspace)", file=sys.stderr)
        return 4
    if found == newest:
        print(f"the given head matches the chain head (entry {found})")
    else:
        print(f"the given head is entry {found}; the chain has moved on {newest - found} "
              f"entr{'y' if newest - found == 1 else 'ies'} since (now at entry {newest})")
    return 0


def _problem(result) -> str:
    if result.first_bad_id is not None:
        return f"audit trail broken at entry {result.first_bad_id}: {result.problem}"
    return f"records do not match the audit trail: {result.problem}"


def run_check(args) -> int:
    import sqlite3

    from caseview.errors import CaseviewError

    problems = []
    with _open(args.workspace, read_only=True) as ws:
        try:
            integrity = ws.integrity_report()
        except sqlite3.DatabaseError as exc:
            integrity = [str(exc)]
        server = "PostgreSQL" if ws.is_postgres else "SQLite"
        print(f"integrity check ({server}): {'ok' if integrity == ['ok'] else 'FAILED'}")
        if integrity != ["ok"]:
            problems.append("SQLite integrity check: " + "; ".join(integrity[:5])
                            + (f" (and {len(integrity) - 5} more)" if len(integrity) > 5 else ""))
        try:
            result = ws.audit_verify()
        except sqlite3.DatabaseError as exc:
            result = None
            problems.append(f"audit verification could not read the workspace ({exc})")
        try:
            n_packed, pack_problem = ws.check_case_packs()
        except (sqlite3.DatabaseError, CaseviewError) as exc:
            n_packed, pack_problem = 0, f"could not be read ({exc})"
    if not pack_problem:
        print(f"packed contacts: {n_packed} cases, all equal to their stored contacts")
    else:
        problems.append(f"packed contacts (the fast copy scoring reads): {pack_problem}; nothing is lost, the "
                        "stored contacts are the record")
    if result is not None:
        if result.first_bad_id is None or result.ok:
            print(f"audit chain: intact, {result.n_entries} entries, head {result.head_hash}")
        if result.ok:
            print(f"records: {result.n_records} checked, all match the audit trail")
        else:
            problems.append(_problem(result))
    for problem in problems:
        print(f"PROBLEM: {problem}")
    print("workspace OK" if not problems else f"workspace has {len(problems)} problem(s); restore a backup or ask "
          "your administrator (caseview backup makes verified copies)")
    return 0 if not problems else 4


def _audited_case(ws, typed):
    """(case ID to list entries about, note when no stored case has it): the stored case the typed ID
    names (:meth:`Workspace.find_case`), else the typed ID normalised, since the trail outlives rows."""
    from caseview.errors import InputError
    from caseview.timeline_io.case_ids import normalise_case_id

    if typed is None:
        return None, None
    try:
        return ws.find_case(typed), None
    except InputError as exc:
        value, why = normalise_case_id(typed)
        if why is not None:
            raise
        return value, str(exc)


def run_audit_show(args) -> int:
    import datetime as _dt
    import json

    from caseview.errors import InputError

    since = None
    if args.since:
        try:
            since = _dt.date.fromisoformat(args.since).isoformat()
        except ValueError:
            raise InputError(f"--since {args.since!r}: expected a date as YYYY-MM-DD") from None
    with _open(args.workspace) as ws:
        case_id, missing = _audited_case(ws, args.case)
        entries = ws.audit_entries(case_id=case_id, since_utc=since)
        head = ws.audit_head()
    from caseview.textfiles import printable

    for e in entries:
        details = json.dumps(e.details, sort_keys=True, ensure_ascii=False)
        if len(details) > 300:
            details = details[:297] + "..."
        fields = (e.id, e.entry_hash, e.at_utc, e.actor, e.action, e.target, details)
        print("\t".join(printable(f) for f in fields))
    print(f"{len(entries)} entries shown; chain head {head}")
    if missing and not entries:
        import sys

        print(f"caseview: note: {missing}", file=sys.stderr)
    return 0
