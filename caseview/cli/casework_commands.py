"""Case work commands: ``record``, ``correct``, ``void``, ``contacts``, ``close``, ``reopen``.

Each command calls one job of :mod:`caseview.operations.casework` (the window calls the same
ones). Every change is audited; bad input prints one line, exits non-zero and stores nothing.
"""

from __future__ import annotations

from caseview import ADVISORY_NOTICE

from .basic import open_workspace
from .options import actor_name, add_actor_option


def _pairs(items, what: str, option: str) -> dict:
    from caseview.errors import InputError

    out = {}
    for item in items or ():
        name, sep, value = str(item).partition("=")
        if not sep or not name.strip():
            raise InputError(f"{option} {item!r}: expected {what}")
        if name.strip() in out:
            raise InputError(f"{option} {name.strip()!r} is given twice; give each once")
        out[name.strip()] = value.strip()
    return out


def _add_contact_options(p, what: str) -> None:
    p.add_argument("--value", action="append", default=[], metavar="CHANNEL=CATEGORY",
                   help=f"{what} value of a channel (repeatable; 'CHANNEL=' = not observed)")
    p.add_argument("--covariate", action="append", default=[], metavar="NAME=NUMBER",
                   help=f"{what} covariate value (repeatable)")
    p.add_argument("--stage-known", metavar="STAGE", help="a stage known at this contact (several joined with '|')")


def register(sub) -> None:
    p = sub.add_parser("record", help="record a contact after a visit (a new case ID creates the case)",
                       description="Record one contact. A case ID never seen before creates the case (give "
                                   "--coordinator then). Covariates not given carry over from the case's latest "
                                   "earlier contact. Checked like an imported row; prints the case's stage "
                                   "probabilities on that date. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--date", required=True, metavar="YYYY-MM-DD")
    p.add_argument("--coordinator", metavar="C", help="coordinator code (required for a new case)")
    _add_contact_options(p, "recorded")
    p.add_argument("--contact-kind", default="scheduled", metavar="scheduled|unscheduled",
                   help="a planned visit (scheduled, the default) or an unscheduled contact (a fall, a worried call)")
    add_actor_option(p)
    p.set_defaults(run=run_record)

    p = sub.add_parser("correct", help="correct a recorded contact (the earlier version is kept)",
                       description="Replace the current version of a contact; what is not given keeps its "
                                   "recorded value. The earlier version stays stored and listed "
                                   "('caseview contacts --all-versions').")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--date", required=True, metavar="YYYY-MM-DD", help="date of the contact to correct")
    p.add_argument("--reason", required=True, metavar="TEXT", help="why it is corrected (audited)")
    p.add_argument("--new-date", metavar="YYYY-MM-DD", help="move the contact to this date")
    p.add_argument("--coordinator", metavar="C", help="correct the coordinator recorded at the contact")
    _add_contact_options(p, "corrected")
    p.add_argument("--contact-kind", metavar="scheduled|unscheduled",
                   help="correct whether the contact was scheduled or unscheduled (default: unchanged)")
    add_actor_option(p)
    p.set_defaults(run=run_correct)

    p = sub.add_parser("void", help="void a contact recorded under the wrong case or that never happened",
                       description="The contact leaves scoring, fitting and exports; it stays stored and "
                                   "listed as voided.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--date", required=True, metavar="YYYY-MM-DD")
    p.add_argument("--reason", required=True, metavar="TEXT", help="why it is voided (audited)")
    add_actor_option(p)
    p.set_defaults(run=run_void)

    p = sub.add_parser("contacts", help="list a case's contacts (with --all-versions: superseded and voided too)")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--all-versions", action="store_true", help="also earlier (superseded) and voided versions")
    p.add_argument("--out", default="-", metavar="FILE.csv", help="output CSV (default: standard output)")
    p.set_defaults(run=run_contacts)

    p = sub.add_parser("close", help="close a case (it leaves the caseload, flags and reports from that date)")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--date", required=True, metavar="YYYY-MM-DD", help="closed from this date on")
    p.add_argument("--reason", required=True, choices=("moved", "discharged", "died", "transferred", "other"))
    add_actor_option(p)
    p.set_defaults(run=run_close)

    p = sub.add_parser("reopen", help="reopen a closed case")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    add_actor_option(p)
    p.set_defaults(run=run_reopen)


def _print_estimate(estimate) -> None:
    if not estimate.p_now:
        print(f"case {estimate.case_id} has no current contact on or before {estimate.as_of}; no estimate")
        return
    parts = ", ".join(f"{stage} {p * 100:.1f}%" for stage, p in estimate.p_now.items())
    print(f"stage probabilities on {estimate.as_of}: {parts}")
    print(f"most likely: {estimate.most_likely}; in a follow-up stage: {estimate.p_follow_up_now * 100:.1f}%")
    print(ADVISORY_NOTICE)


def _print_suggestion(case_id: str, text: str, workspace: str) -> None:
    if text:
        print(f"note: {text} ('caseview close {workspace} {case_id} --date YYYY-MM-DD --reason moved|discharged|"
              "died|transferred|other')")


def run_record(args) -> int:
    from caseview.operations import casework

    with open_workspace(args.workspace) as ws:
        result = casework.record_contact(
            ws, args.case_id, args.date, actor_name(args), _pairs(args.value, "CHANNEL=CATEGORY", "--value"),
            _pairs(args.covariate, "NAME=NUMBER", "--covariate"), args.stage_known, args.coordinator,
            contact_kind=args.contact_kind)
    created = " (new case)" if result.case_created else ""
    carried = f"; carried over {', '.join(result.carried_over)} from the latest earlier contact" \
        if result.carried_over else ""
    print(f"recorded a contact of {result.case_id} on {result.date}{created}{carried}")
    _print_estimate(result.estimate)
    _print_suggestion(result.case_id, result.closing_suggestion, args.workspace)
    return 0


def run_correct(args) -> int:
    from caseview.operations import casework

    with open_workspace(args.workspace) as ws:
        change = casework.correct_contact(
            ws, args.case_id, args.date, args.reason, actor_name(args), new_date=args.new_date,
            values=_pairs(args.value, "CHANNEL=CATEGORY", "--value"),
            covariates=_pairs(args.covariate, "NAME=NUMBER", "--covariate"), stage_known=args.stage_known,
            coordinator=args.coordinator, contact_kind=args.contact_kind)
    moved = f" (now on {change.details['new']['date']})" if change.details["new"]["date"] != args.date else ""
    print(f"corrected the contact of {change.case_id} on {change.details['date']}{moved}; the earlier version is "
          "kept (superseded)")
    _print_estimate(change.estimate)
    _print_suggestion(change.case_id, change.closing_suggestion, args.workspace)
    return 0


def run_void(args) -> int:
    from caseview.operations import casework

    with open_workspace(args.workspace) as ws:
        change = casework.void_contact(ws, args.case_id, args.date, args.reason, actor_name(args))
    print(f"voided the contact of {change.case_id} on {change.details['date']}; it stays stored (voided) and no "
          "longer counts")
    _print_estimate(change.estimate)
    return 0


def run_contacts(args) -> int:
    from caseview.operations import casework

    from .basic import safe_text, write_table

    with open_workspace(args.workspace) as ws:
        model, _ = ws.current_model()
        versions = casework.list_contacts(ws, args.case_id, all_versions=args.all_versions)
    channels = [c.name for c in model.channels]
    covariates = list(model.covariates)
    header = ["case_id", "date", *channels, *covariates, "contact_kind", "stage_known", "status", "recorded_at",
              "recorded_by", "reason", "changed_at", "changed_by"]

    def number(value):
        return "" if value is None else f"{value:g}"

    rows = []
    for v in versions:
        reason = v.reason if v.status != casework.store.CURRENT else v.recorded_reason
        rows.append([v.case_id, v.date, *[v.values.get(c, "") for c in channels],
                     *[number(v.covariates.get(k)) for k in covariates], v.contact_kind, v.stage_known, v.status,
                     v.recorded_at, v.recorded_by, reason, v.ended_at, v.ended_by])
    columns = [safe_text(column) for column in zip(*rows)] if rows else [[] for _ in header]
    write_table(args.out, header, columns, advisory=False)
    if args.out != "-":
        print(f"case {args.case_id}: {len(rows)} row(s); wrote {args.out}")
    return 0


def run_close(args) -> int:
    from caseview.operations import casework

    with open_workspace(args.workspace) as ws:
        details = casework.close_case(ws, args.case_id, args.date, args.reason, actor_name(args))
    print(f"closed case {details['case_id']} from {details['closed_on']} ({details['reason']}); it leaves the "
          "caseload, flags and reports from that date ('--include-closed' shows it; 'caseview reopen' reopens it)")
    return 0


def run_reopen(args) -> int:
    from caseview.operations import casework

    with open_workspace(args.workspace) as ws:
        details = casework.reopen_case(ws, args.case_id, actor_name(args))
    print(f"reopened case {details['case_id']} (it was closed from {details['old']['closed_on']}, "
          f"{details['old']['reason']})")
    return 0
