"""``caseview report``: the team-meeting PDF, the XLSX workbook or the CSV stage summary.

Heavy libraries (matplotlib, openpyxl, the engine) are imported inside :func:`run_report`.
"""

from __future__ import annotations

from .options import actor_name, add_actor_option, add_as_of_option, add_horizon_option, add_seed_option, as_of_date


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "report", help="write a caseload report (PDF, XLSX or CSV, chosen by the file extension)",
        description="Write a caseload report for a team meeting: a PDF with charts and tables, an XLSX "
                    "workbook or a CSV stage summary (format from the extension of --out). The report is "
                    "recorded in the workspace's audit trail. Advisory only.")
    parser.add_argument("workspace", metavar="WS", help="workspace file")
    add_as_of_option(parser, help="date the caseload is assessed on")
    parser.add_argument("--out", required=True, metavar="FILE", help="output file: .pdf, .xlsx or .csv")
    add_horizon_option(parser)
    parser.add_argument("--coordinator", metavar="C", help="only this coordinator's cases")
    parser.add_argument("--flagged-only", action="store_true", help="list only flagged cases")
    parser.add_argument("--since", metavar="YYYY-MM-DD", help="show what changed since this earlier date")
    parser.add_argument("--dates", choices=("calendar", "relative", "shifted"), default="calendar",
                        help="calendar (default); relative = days since each case's first contact (safer for "
                             "sharing); shifted = a random offset per case (NOT Safe Harbor de-identification)")
    add_seed_option(parser, "--dates shifted", default=None)
    parser.add_argument("--include-closed", action="store_true",
                        help="also cases closed on or before the as-of date")
    add_actor_option(parser, "who is making the report, recorded in the audit trail")
    parser.set_defaults(run=run_report)


def run_report(args) -> int:
    import sys

    from caseview import ADVISORY_NOTICE
    from caseview.reports import build_report, report_format
    from caseview.dates import parse_date
    from caseview.storage import Workspace

    report_format(args.out)                      # fail on a bad extension before opening anything
    actor = actor_name(args)                     # one line of text (the audit trail is listed line by line)
    as_of = as_of_date(args)
    since = parse_date(args.since, "--since") if args.since else None
    if args.seed is not None and args.dates != "shifted":
        print("caseview: note: --seed only matters with --dates shifted", file=sys.stderr)
    with Workspace.open(args.workspace) as ws:
        for warning in ws.warnings:
            print(f"caseview: warning: {warning}", file=sys.stderr)
        result = build_report(ws, as_of, args.out, horizon_days=args.horizon, coordinator=args.coordinator,
                              flagged_only=args.flagged_only, since=since, dates=args.dates, seed=args.seed,
                              actor=actor, include_closed=args.include_closed)
    what = f"{result.count} page(s)" if result.format == "pdf" else f"{result.count} case row(s)"
    print(f"wrote {result.path} ({result.format}, {what}; sha256 {result.sha256})")
    print(f"audit chain head in the report: {result.audit_head}")
    print(f"report recorded as audit entry {result.entry_id}; audit chain head now: {result.entry_hash}")
    print(ADVISORY_NOTICE)
    if result.not_scored:
        from caseview.errors import EXIT_CASES_NOT_SCORED

        named = "; ".join(f"{c} ({r})" for c, _, r in result.not_scored[:3])
        more = f"; and {len(result.not_scored) - 3} more" if len(result.not_scored) > 3 else ""
        print(f"caseview: {len(result.not_scored)} case(s) cannot be scored: {named}{more} (marked in the report; "
              "every other case was scored)", file=sys.stderr)
        return EXIT_CASES_NOT_SCORED
    return 0
