"""``caseview outlook`` and ``caseview target``: the caseload's stock-and-flow outlook and where to invest places.

Both call the application functions in :mod:`caseview.operations.outlook` (the window calls the
same ones), write CSV files with the ``advisory`` column, and print what they assumed.
"""

from __future__ import annotations

import sys

from caseview import ADVISORY_NOTICE

from .basic import open_workspace, stderr_progress
from .options import add_as_of_option, add_horizon_option, add_seed_option, as_of_date


def register(sub) -> None:
    p = sub.add_parser("outlook", help="expected number of open cases in each stage at each coming month end",
                       description="Sum of every open case's forecast (stage probabilities now moved on with "
                                   "the model's rates and the case's covariates), with 95% bands and the expected "
                                   "entries into each stage per month; optionally with new referrals and with "
                                   "parameter uncertainty. One row per month end and stage, plus a combined "
                                   "'follow-up stages' row. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    add_as_of_option(p)
    p.add_argument("--months", default="12", metavar="N", help="month ends ahead (default 12, at most 120)")
    p.add_argument("--referrals", default="auto", metavar="auto|none|N",
                   help="new referrals: estimated from first contacts in the last year (auto, default), left out "
                        "(none), or N a month")
    p.add_argument("--uncertainty", default="none", metavar="none|parameters",
                   help="parameters: widen the bands by drawing all the fitted model's parameters from the fit's "
                        "estimated sampling distribution and moving each case's stage probabilities now and its "
                        "forecast with every draw (needs a fitted model; default none)")
    p.add_argument("--draws", default="200", metavar="N", help="parameter draws (default 200)")
    add_seed_option(p, "the parameter draws", as_text=True)
    p.add_argument("--coordinator", metavar="CODE", help="only this coordinator's cases and referrals")
    p.add_argument("--out", required=True, metavar="OUTLOOK.csv", help="output CSV ('-' for standard output)")
    p.set_defaults(run=run_outlook_command)

    p = sub.add_parser("target", help="rank cases for a limited number of places by the risk a change would avert",
                       description="For each candidate case, the chance of reaching a follow-up stage within the "
                                   "horizon without and with the change (what-if forecast); the N cases with the "
                                   "largest reduction, and how that choice compares with enrolling the N "
                                   "highest-risk cases or N cases at random. The ranking is a statistical estimate "
                                   "for planning, not a decision about any person's care. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    add_as_of_option(p)
    p.add_argument("--set", action="append", required=True, metavar="NAME=VALUE", dest="changes",
                   help="the covariate value a place brings, e.g. balance_programme=1 (repeatable)")
    p.add_argument("--places", required=True, metavar="N", help="number of places")
    add_horizon_option(p, 180, help="days within which reaching counts (default 180)", as_text=True)
    p.add_argument("--among", default="flagged", metavar="flagged|all",
                   help="candidates: flagged open cases (default) or all open cases")
    add_seed_option(p, "the random-choice comparison", as_text=True)
    p.add_argument("--out", required=True, metavar="TARGET.csv",
                   help="ranking CSV ('-' for standard output); the comparison goes to TARGET_summary.csv")
    p.set_defaults(run=run_target_command)


def _interrupt_safe(function):
    from caseview.errors import Cancelled

    try:
        return function()
    except Cancelled:
        raise KeyboardInterrupt from None
    finally:
        if sys.stderr.isatty():
            print("\r" + " " * 30 + "\r", end="", file=sys.stderr)


def run_outlook_command(args) -> int:
    from .basic import report_unscorable
    from caseview.operations.outlook import export_outlook, outlook_notes, run_outlook

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        outlook = _interrupt_safe(lambda: run_outlook(ws, as_of, args.months, args.referrals, args.uncertainty,
                                                      args.draws, args.seed, args.coordinator,
                                                      callback=stderr_progress("outlook")))
    export_outlook(outlook, args.out)
    out = sys.stderr if args.out == "-" else sys.stdout
    for line in outlook_notes(outlook):
        print(line, file=out)
    c = len(outlook.rows) - 1
    print(f"  {'month end':<12} {'in follow-up stages':>20} {'95% band':>14} {'entries':>8}", file=out)
    for t, day in enumerate(outlook.dates):
        band = f"{outlook.lower_95[t, c]:.0f}-{outlook.upper_95[t, c]:.0f}"
        print(f"  {day.isoformat():<12} {outlook.expected[t, c]:>20.1f} {band:>14} "
              f"{outlook.entries_expected[t, c]:>8.1f}", file=out)
    if args.out != "-":
        print(f"wrote {args.out}", file=out)
    print(ADVISORY_NOTICE, file=out)
    if outlook.not_scored is not None:   # named on stderr, exit 4, as score and flags do
        return report_unscorable(outlook.not_scored, "left out of the outlook's counts")
    return 0


def run_target_command(args) -> int:
    from caseview.operations.outlook import export_targeting, run_targeting, targeting_summary_lines

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        result = _interrupt_safe(lambda: run_targeting(ws, as_of, args.changes, args.places, args.horizon,
                                                       args.among, args.seed, callback=stderr_progress("target")))
    summary = export_targeting(result, args.out)
    out = sys.stderr if args.out == "-" else sys.stdout
    lines = targeting_summary_lines(result)
    for line in lines[:-2]:
        print(line, file=out)
    if result.n_ranked:
        print(f"  {'rank':>4}  {'case_id':<12} {'coordinator':<11} {'without':>8} {'with':>6} {'reduction':>9}",
              file=out)
        for i in range(min(10, result.n_ranked)):
            print(f"  {i + 1:>4}  {result.case_ids[i]:<12} {result.coordinators[i]:<11} "
                  f"{result.p_reach_without[i]:>8.2f} {result.p_reach_with[i]:>6.2f} {result.reduction[i]:>9.3f}",
                  file=out)
    if summary:
        print(f"wrote {args.out} and {summary}", file=out)
    for line in lines[-2:]:
        print(line, file=out)
    return 0
