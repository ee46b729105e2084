"""``caseview flags``, ``review``, ``reviews``, ``forecast``, ``whatif`` and ``rules``.

Every output about flags or forecasts ends with the advisory notice (``caseview.ADVISORY_NOTICE``);
CSV files carry it in an ``advisory`` column (added by ``write_table``) so that they stay readable by any
CSV reader.
"""

from __future__ import annotations

import sys

from caseview import ADVISORY_NOTICE

from .options import actor_name, add_actor_option, add_as_of_option, add_horizon_option, as_of_date
from .basic import (CANNOT_BE_SCORED, format_days, format_probabilities,
                    open_workspace, report_unscorable, safe_text, write_table)

STATUS_CHOICES = ("acknowledged", "actioned", "dismissed")


def register(sub) -> None:
    p = sub.add_parser("flags", help="cases flagged for follow-up, with reasons and next contact due",
                       description="One row per flagged case: the rules that fired, why (the 'reason' column: "
                                   "plain sentences with the chance against the rule's threshold and the recent "
                                   "contact that moved it most; the numbers are also in their own columns), the "
                                   "next contact due (a date for every case; before the as-of date means "
                                   "overdue) and the review status. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    add_as_of_option(p)
    add_horizon_option(p)
    p.add_argument("--out", required=True, metavar="FLAGS.csv", help="output CSV ('-' for standard output)")
    p.add_argument("--save", action="store_true",
                   help="store this run as a snapshot (the sharp_rise rule compares with the latest earlier one)")
    p.add_argument("--include-closed", action="store_true", help="also cases closed on or before the as-of date")
    add_actor_option(p)
    p.set_defaults(run=run_flags)

    p = sub.add_parser("review", help="record a supervisor review of a case's flag",
                       description="Change a case's review status: new -> acknowledged -> actioned or "
                                   "dismissed (a dismissal needs a reason in --note); actioned or dismissed "
                                   "-> acknowledged again. Each change is audited. The name recorded is the OS "
                                   "user unless --by is given (attribution, not authentication).")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--status", required=True, choices=STATUS_CHOICES)
    p.add_argument("--note", required=True, metavar="TEXT")
    add_actor_option(p, "who made the change")
    add_as_of_option(p, required=False, help="date whose P(follow-up now) is recorded with the review (default: today, UTC)")
    p.set_defaults(run=run_review)

    p = sub.add_parser("reviews", help="list reviews (supervisor view)",
                       description="The latest review of every reviewed case (all changes with --all).")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--status", choices=("new",) + STATUS_CHOICES)
    p.add_argument("--coordinator", metavar="CODE")
    p.add_argument("--case", metavar="CASE_ID", help="only this case")
    p.add_argument("--all", action="store_true", help="every change, not only the latest per case")
    p.add_argument("--out", metavar="REVIEWS.csv", help="also write the list as CSV ('-' for standard output)")
    p.set_defaults(run=run_reviews)

    p = sub.add_parser("forecast", help="one case's forecast, optionally with changed covariates (what-if)",
                       description="Stage probabilities now, at the horizon and of reaching each stage within "
                                   "it; with --set, side by side with the forecast under the changed covariate "
                                   "values from the as-of date on. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    add_as_of_option(p)
    add_horizon_option(p)
    p.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", dest="changes",
                   help="covariate value from the as-of date on (repeatable), e.g. balance_programme=1")
    p.add_argument("--out", required=True, metavar="FORECAST.csv", help="output CSV ('-' for standard output)")
    p.set_defaults(run=run_forecast)

    p = sub.add_parser("whatif", help="how many cases would be flagged at the horizon under a change",
                       description="Counts of cases with P(follow-up stage at the horizon) over the "
                                   "in_follow_up_now threshold, and of cases likely to reach a follow-up stage, "
                                   "with and without the changed covariate values for every case. "
                                   + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    add_as_of_option(p)
    add_horizon_option(p)
    p.add_argument("--set", action="append", required=True, metavar="NAME=VALUE", dest="changes")
    p.add_argument("--include-closed", action="store_true", help="also cases closed on or before the as-of date")
    p.set_defaults(run=run_whatif)

    p = sub.add_parser("rules", help="show or change the workspace's follow-up rules",
                       description="Show the rules; --load FILE.json replaces them from a rule file, "
                                   "--set NAME.KEY=VALUE changes one setting (KEY: enabled, threshold or a rule "
                                   "parameter), --export FILE.json writes them out. Changes are audited.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--set", action="append", default=[], metavar="NAME.KEY=VALUE", dest="assignments")
    p.add_argument("--load", metavar="FILE.json")
    p.add_argument("--export", metavar="FILE.json")
    add_actor_option(p)
    p.set_defaults(run=run_rules)


# ---------------------------------------------------------------- flags
def run_flags(args) -> int:
    import numpy as np

    from caseview.followup import assess_caseload
    from caseview.followup.wording import plural

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        if ws.read_only and not args.save:
            print(f"caseview: note: {ws.path} is read-only: dismissed flags that would re-open are not re-opened",
                  file=sys.stderr)
        a = assess_caseload(ws, as_of, args.horizon, save_snapshot=args.save, actor=actor_name(args),
                            reopen=not ws.read_only, include_closed=args.include_closed)
    s = a.scores
    rows = a.order[a.is_flagged[a.order]]
    due = a.next_contact_due_day[rows]
    due_text = [d if day >= 0 else "" for d, day in zip(format_days(np.maximum(due, 0)), due)]
    header = ["case_id", "coordinator", "flags", "reason", "p_follow_up_now", "p_reach_follow_up",
              "next_contact_due", "review_status", "reviewed_by", "reviewed_at", "review_note", "most_likely_stage",
              "days_since_contact", "priority"]
    n = rows.size
    columns = [safe_text(s.case_ids[rows]), safe_text(s.coordinators[rows]), list(a.flags[rows]),
               safe_text(a.reason_text[rows]), format_probabilities(s.p_follow_up_now[rows]),
               format_probabilities(s.p_reach_follow_up[rows]), due_text, list(a.review_status[rows]),
               safe_text(a.reviewed_by[rows]), list(a.reviewed_at[rows]), safe_text(a.review_note[rows]),
               list(s.most_likely_stage_names[rows]),
               s.days_since_contact[rows].astype(str).tolist(), [f"{v:.4f}" for v in a.priority[rows]]]
    lost = s.unscorable
    if lost.n_cases:  # needing attention before any flag: listed first, the reason in the reason column
        blank = [""] * lost.n_cases
        columns = [list(a) + list(b) for a, b in zip(
            [safe_text(lost.case_ids), safe_text(lost.coordinators), [CANNOT_BE_SCORED] * lost.n_cases,
             safe_text(lost.reasons)] + [blank] * (header.index("days_since_contact") - 4)
            + [lost.days_since_contact.astype(str).tolist(), blank], columns)]
    write_table(args.out, header, columns)
    out = sys.stderr if args.out == "-" else sys.stdout
    print(f"{n} of {plural(s.n_cases, 'case')} flagged as of {as_of.isoformat()} (horizon {s.horizon_days:g} days)"
          + (f"; {lost.n_cases} cannot be scored (listed first)" if lost.n_cases else "")
          + (f"; wrote {args.out}" if args.out != "-" else ""), file=out)
    for rule in a.rules:
        state = "" if rule.enabled else " (switched off)"
        print(f"  {rule.name:<26} {a.flag_counts()[rule.name]:>5}{state}", file=out)
    if a.previous_as_of is None and a.rules["sharp_rise"].enabled:
        print("  (sharp_rise needs an earlier run saved with --save; none before this date)", file=out)
    for code in a.reopened:
        print(f"  re-opened dismissed flag: {code}", file=out)
    if a.saved_run_id is not None:
        print(f"  saved score run {a.saved_run_id}", file=out)
    if n:
        from caseview.followup.wording import due_words

        print("top by priority:", file=out)
        print(f"  {'case_id':<12} {'P(f-u now)':>10} {'P(reach)':>9}  {'next contact due':<26} {'review':<12} flags",
              file=out)
        for r in rows[:10]:
            print(f"  {s.case_ids[r]:<12} {s.p_follow_up_now[r]:>10.2f} {s.p_reach_follow_up[r]:>9.2f}  "
                  f"{due_words(a.next_contact_due_day[r], s.as_of_day):<26} {a.review_status[r]:<12} {a.flags[r]}",
                  file=out)
        print("why the first one is flagged: " + str(a.reason_text[rows[0]]), file=out)
    print(ADVISORY_NOTICE, file=out)
    return report_unscorable(lost)


# ---------------------------------------------------------------- reviews
def run_review(args) -> int:
    from caseview.followup import record_review

    as_of = as_of_date(args)
    actor = actor_name(args)
    with open_workspace(args.workspace) as ws:
        row = record_review(ws, args.case_id, args.status, args.note, actor, None, as_of)
        audit = ws.audit_entries(case_id=row.case_id)
    previous = audit[-1].details.get("from", "new") if audit else "new"
    p = "" if row.p_follow_up is None else f"; P(follow-up now) {row.p_follow_up:.2f} as of {row.as_of}"
    print(f"{row.case_id}: {previous} -> {row.status} by {row.actor} at {row.at_utc}{p} (audit entry {row.audit_id})")
    return 0


def run_reviews(args) -> int:
    from caseview.storage import followup_store as store

    with open_workspace(args.workspace) as ws:
        case_id = ws.find_case(args.case) if args.case is not None else None
        coordinator = ws.find_coordinator(args.coordinator) if args.coordinator is not None else None
        rows = store.review_rows(ws.connection, case_id, args.status, coordinator, latest_only=not args.all)
    header = ["case_id", "coordinator", "status", "reviewed_by", "reviewed_at", "note", "flags",
              "p_follow_up_now", "as_of", "audit_id"]
    if args.out:
        columns = [safe_text(r.case_id for r in rows), safe_text(r.coordinator for r in rows),
                   [r.status for r in rows], safe_text(r.actor for r in rows), [r.at_utc for r in rows],
                   safe_text(r.note for r in rows), [r.flags for r in rows],
                   ["" if r.p_follow_up is None else f"{r.p_follow_up:.6f}" for r in rows],
                   [r.as_of or "" for r in rows], ["" if r.audit_id is None else str(r.audit_id) for r in rows]]
        write_table(args.out, header, columns)
        if args.out == "-":
            return 0
    which = "review changes" if args.all else "reviewed cases"
    print(f"{len(rows)} {which}")
    from caseview.textfiles import printable

    for r in rows:
        p = "    " if r.p_follow_up is None else f"{r.p_follow_up:.2f}"
        print(f"  {printable(r.case_id):<12} {printable(r.coordinator):<6} {r.status:<12} {p}  "
              f"{printable(r.actor):<14} {r.at_utc[:19]}  {printable(r.note)}")
    return 0


# ---------------------------------------------------------------- forecasts
def run_forecast(args) -> int:
    from caseview.followup import whatif_forecast
    from caseview.followup.whatif import parse_changes

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        model, _ = ws.current_model()
        changes = parse_changes(args.changes, model)
        w = whatif_forecast(ws, args.case_id, as_of, args.horizon, changes)
    mask = model.follow_up_mask
    header = ["stage", "p_now", "p_at_horizon", "p_reach"]
    columns = [list(w.stages), format_probabilities(w.unchanged.p_now), format_probabilities(w.unchanged.p_at_horizon),
               format_probabilities(w.unchanged.p_reach)]
    if changes:
        header += ["p_at_horizon_changed", "p_reach_changed"]
        columns += [format_probabilities(w.changed.p_at_horizon), format_probabilities(w.changed.p_reach)]
    header += ["follow_up_stage"]
    columns += [["yes" if m else "no" for m in mask]]
    write_table(args.out, header, columns)
    out = sys.stderr if args.out == "-" else sys.stdout
    print(f"case {w.case_id} as of {w.as_of.isoformat()}, horizon {w.horizon_days:g} days"
          + (f"; wrote {args.out}" if args.out != "-" else ""), file=out)
    if changes:
        text = ", ".join(f"{k}={v:g}" for k, v in changes.items())
        print(f"changed from the as-of date on: {text}", file=out)
        print(f"  {'stage':<28} {'now':>6} {'horizon':>8} {'changed':>8} {'reach':>6} {'changed':>8}", file=out)
        for i, stage in enumerate(w.stages):
            print(f"  {stage:<28} {w.unchanged.p_now[i]:>6.2f} {w.unchanged.p_at_horizon[i]:>8.2f} "
                  f"{w.changed.p_at_horizon[i]:>8.2f} {w.unchanged.p_reach[i]:>6.2f} {w.changed.p_reach[i]:>8.2f}",
                  file=out)
        print(f"  P(follow-up stage at horizon) {w.unchanged.p_follow_up_at_horizon:.2f} -> "
              f"{w.changed.p_follow_up_at_horizon:.2f}; P(reach follow-up) {w.unchanged.p_reach_follow_up:.2f} -> "
              f"{w.changed.p_reach_follow_up:.2f}", file=out)
    else:
        print(f"  P(follow-up stage at horizon) {w.unchanged.p_follow_up_at_horizon:.2f}; "
              f"P(reach follow-up) {w.unchanged.p_reach_follow_up:.2f}", file=out)
    print(ADVISORY_NOTICE, file=out)
    return 0


def run_whatif(args) -> int:
    from caseview.followup import caseload_whatif, workspace_rules
    from caseview.followup.whatif import parse_changes
    from caseview.scoring import score_caseload

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        model, _ = ws.current_model()
        changes = parse_changes(args.changes, model)
        rules = workspace_rules(ws)
        scores = score_caseload(ws, as_of, args.horizon, include_closed=args.include_closed)
    result = caseload_whatif(scores, changes, rules)
    text = ", ".join(f"{k}={v:g}" for k, v in changes.items())
    print(f"{result.n_cases} cases as of {as_of.isoformat()}, horizon {result.horizon_days:g} days; "
          f"change for every case from the as-of date on: {text}")
    print(f"  in a follow-up stage at the horizon (P >= {rules['in_follow_up_now'].threshold:.2f}): "
          f"{result.flagged_at_horizon_without} without, {result.flagged_at_horizon_with} with the change")
    print(f"  likely to reach a follow-up stage (P >= {rules['likely_to_reach_follow_up'].threshold:.2f}): "
          f"{result.reaching_without} without, {result.reaching_with} with the change")
    print(ADVISORY_NOTICE)
    return report_unscorable(scores.unscorable, "left out of these counts")


# ---------------------------------------------------------------- rules
def run_rules(args) -> int:
    from caseview.followup.rules import describe, load_rule_file, save_rule_file, save_workspace_rules, workspace_rules

    with open_workspace(args.workspace) as ws:
        current = workspace_rules(ws)
        rules = load_rule_file(args.load) if args.load else current
        if args.assignments:
            rules = rules.with_changes(args.assignments)
        changed = rules != current
        if changed:
            save_workspace_rules(ws, rules, actor_name(args))
    if args.export:
        save_rule_file(rules, args.export)
    print(("rules changed:" if changed else "rules:") + f" {args.workspace}")
    for line in describe(rules):
        print("  " + line)
    if args.export:
        print(f"wrote {args.export}")
    return 0
