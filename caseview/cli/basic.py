"""``caseview score``, ``caseview history`` and ``caseview demo``."""

from __future__ import annotations

import datetime as dt
import sys
from pathlib import Path

from caseview import ADVISORY_NOTICE

from .options import actor_name, add_actor_option, add_as_of_option, add_horizon_option, as_of_date

ROOT = Path(__file__).resolve().parents[2]
DEMO_TIMELINES = ROOT / "demo_cases" / "home_support_demo.csv"
DEMO_MODEL = ROOT / "demo_cases" / "home_support_model.json"


def register(sub) -> None:
    p = sub.add_parser("score", help="stage probabilities now and within a horizon for every case",
                       description="Score every case whose first contact is on or before the as-of date, "
                                   "using only contacts on or before it. " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    add_as_of_option(p)
    add_horizon_option(p)
    p.add_argument("--out", required=True, metavar="SCORES.csv", help="output CSV ('-' for standard output)")
    p.add_argument("--include-closed", action="store_true", help="also cases closed on or before the as-of date")
    p.set_defaults(run=run_score)

    p = sub.add_parser("history", help="smoothed stage probabilities and most likely path at each contact",
                       description="One row per contact of one case: recorded values, smoothed stage "
                                   "probabilities given all that case's contacts up to the as-of date, and "
                                   "the most likely stage path (Viterbi). " + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    p.add_argument("case_id", metavar="CASE_ID")
    add_as_of_option(p, required=False, help="use contacts up to this date (default: all)")
    p.add_argument("--out", required=True, metavar="HISTORY.csv", help="output CSV ('-' for standard output)")
    p.set_defaults(run=run_history)

    p = sub.add_parser("demo", help="create a ready workspace holding the invented demo caseload",
                       description="Create a workspace at PATH with the invented home-support demo model and "
                                   "caseload (no real people or data).")
    p.add_argument("path", metavar="PATH")
    add_actor_option(p)
    p.set_defaults(run=run_demo)


# ---------------------------------------------------------------- helpers
def open_workspace(path, read_only: bool | None = None):
    """Open a workspace for a command; read-only when asked, or when the file or folder cannot be written."""
    from caseview.storage import Workspace

    ws = Workspace.open(path, read_only=read_only)
    for warning in ws.warnings:
        print(f"caseview: warning: {warning}", file=sys.stderr)
    return ws


def stderr_progress(label: str):
    """A ``callback(fraction)`` that shows ``label: NN%`` on stderr when it is a terminal (else silent)."""
    shown = {"last": -1}

    def progress(fraction):
        percent = int(100 * fraction)
        if percent != shown["last"] and sys.stderr.isatty():
            print(f"\r{label}: {percent:3d}%", end="", file=sys.stderr, flush=True)
        shown["last"] = percent

    return progress


def write_table(out: str, header: list, columns: list, advisory: bool = True) -> None:
    """Write columns (equal-length sequences of already formatted text) as CSV to a path or '-'.

    With ``advisory`` (the default) a last column ``advisory`` repeats the advisory notice on every
    row, so the caution travels with any row copied out of the file. Headers and text cells that a
    spreadsheet would run as a formula are neutralised (:mod:`caseview.cell_text`), whatever the caller
    passed in.
    """
    import csv
    import itertools

    from caseview.cell_text import neutralise

    if advisory and columns:
        header = [*header, "advisory"]
        columns = [*columns, itertools.repeat(ADVISORY_NOTICE, len(columns[0]))]
    columns = [list(column) for column in columns]  # read once, whichever way they are written
    header = [neutralise(str(name)) for name in header]   # a header is never a number
    body = _csv_body(columns)

    def write(handle):
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        if body is not None:
            handle.write(body)
        else:
            rows = zip(*columns) if columns else iter(())
            writer.writerows([neutralise(v, keep_numbers=True) for v in row] for row in rows)

    if out == "-":
        write(sys.stdout)
        return
    from caseview.private_files import private_text

    with private_text(Path(out)) as handle:  # owner-only, complete or not at all
        write(handle)


_NEEDS_QUOTES = (",", '"', "\n", "\r")


def _csv_body(columns):
    """The rows as CSV text, exactly as ``csv.writer`` writes them, built column by column.

    100,000 rows x 20 columns take ~0.1 s instead of ~0.35 s row by row: a column is checked for
    characters that need quoting in one pass over its joined text, and only cells that have them
    go through the csv module. None (use the csv module) unless every cell is text and there are
    at least two columns (a lone empty cell is written as ``""``).
    """
    import csv
    import io

    from caseview.cell_text import neutralise_all, risky_joined

    if len(columns) < 2:
        return None
    cells = []
    for column in columns:
        if len(column) > 1 and isinstance(column[0], str) and "\x00" not in column[0] \
                and column.count(column[0]) == len(column):
            cells.append([_csv_cell(column[0])] * len(column))  # one text in every row (advisory, as-of date)
            continue
        try:
            joined = "\x00".join(column)
        except TypeError:  # not all text
            return None
        if joined.count("\x00") != max(len(column) - 1, 0):
            return None
        if risky_joined(joined):
            column = neutralise_all(column, keep_numbers=True)
            joined = "\x00".join(column)
        if any(mark in joined for mark in _NEEDS_QUOTES):
            buffer = io.StringIO()
            writer = csv.writer(buffer, lineterminator="\n")
            written = {}
            for value in set(column):  # each distinct text once (the advisory column is one text)
                if any(mark in value for mark in _NEEDS_QUOTES):
                    buffer.seek(0)
                    buffer.truncate()
                    writer.writerow([value])
                    written[value] = buffer.getvalue()[:-1]
                else:
                    written[value] = value
            column = list(map(written.__getitem__, column))
        cells.append(column)
    if len({len(c) for c in cells}) != 1:
        return None
    if not cells[0]:
        return ""
    return "\n".join(map(",".join, zip(*cells))) + "\n"


def _csv_cell(value: str) -> str:
    """One text cell as ``csv.writer`` writes it after :func:`caseview.cell_text.neutralise` (numbers kept)."""
    import csv
    import io

    from caseview.cell_text import neutralise

    value = neutralise(value, keep_numbers=True)
    if not any(mark in value for mark in _NEEDS_QUOTES):
        return value
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerow([value])
    return buffer.getvalue()[:-1]


def format_probabilities(values):
    """Probabilities (clipped to 0..1) as fixed 6-decimal text, exactly as ``"%.6f"`` writes them, vectorised.

    The digits come from integer arithmetic on ``rint(value * 1e6)``; a value whose scaled form lies
    within 1e-6 of a rounding tie (where the product may round otherwise than the exact decimal
    expansion does) and any value that is not finite are written with ``"%.6f"`` itself.
    """
    import numpy as np

    values = np.clip(np.asarray(values, dtype=float), 0.0, 1.0)
    if not values.size:
        return []
    scaled = values * 1e6
    micro = np.rint(np.nan_to_num(scaled)).astype(np.int64)  # 0 ..= 1,000,000
    digits = np.empty((values.size, 8), dtype=np.uint8)
    digits[:, 0] = 48 + micro // 1_000_000
    digits[:, 1] = 46  # '.'
    rest = micro % 1_000_000
    for k in range(7, 1, -1):
        digits[:, k] = 48 + rest % 10
        rest //= 10
    text = digits.view("S8").reshape(-1).astype("U8").tolist()
    doubtful = np.flatnonzero(~np.isfinite(values) | (np.abs(scaled - np.floor(scaled) - 0.5) < 1e-6))
    for i in doubtful.tolist():
        text[i] = "%.6f" % values[i]
    return text


def format_days(days):
    """ISO texts of day numbers (:func:`caseview.dates.days_text`)."""
    from caseview.dates import days_text

    return days_text(days)


def safe_text(values):
    """Text cells that a spreadsheet could run as a formula get a leading apostrophe (:mod:`caseview.cell_text`)."""
    from caseview.cell_text import neutralise_all

    return neutralise_all([str(v) for v in values])


# ---------------------------------------------------------------- score
def run_score(args) -> int:
    import numpy as np

    from caseview.followup import assess_caseload

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        assessment = assess_caseload(ws, as_of, args.horizon, reopen=False, explain_reasons=False,
                                     include_closed=args.include_closed)
        scores, flags = assessment.scores, assessment.flags
    model = scores.model
    n = scores.n_cases
    header = ["case_id", "as_of", "last_contact", "days_since_contact"]
    columns = [safe_text(scores.case_ids), [as_of.isoformat()] * n, format_days(scores.last_contact_day),
               scores.days_since_contact.astype(str).tolist()]
    for s, stage in enumerate(model.stages):
        header.append(f"p_{stage}")
        columns.append(format_probabilities(scores.p_now[:, s]))
    header += ["most_likely_stage", "horizon_days"]
    columns += [scores.most_likely_stage_names.tolist(), [f"{scores.horizon_days:g}"] * n]
    for s, stage in enumerate(model.stages):
        header.append(f"p_reach_{stage}")
        columns.append(format_probabilities(scores.p_reach[:, s]))
    header += ["flags", "coordinator", "p_follow_up_now", "p_reach_follow_up"]
    columns += [list(flags), safe_text(scores.coordinators),
                format_probabilities(scores.p_follow_up_now), format_probabilities(scores.p_reach_follow_up)]
    lost = scores.unscorable
    if lost.n_cases:  # one row each, in case order: blank numbers, the reason in the flags column
        blank = [""] * lost.n_cases
        extra = [safe_text(lost.case_ids), [as_of.isoformat()] * lost.n_cases, format_days(lost.last_contact_day),
                 lost.days_since_contact.astype(str).tolist()] + [blank] * model.n_stages + \
            [blank, [f"{scores.horizon_days:g}"] * lost.n_cases] + [blank] * model.n_stages + \
            [unscorable_flags(lost), safe_text(lost.coordinators), blank, blank]
        columns = merge_case_rows(columns, scores.case_ids, extra, lost.case_ids)
    write_table(args.out, header, columns)
    if args.out != "-":
        flagged = int(np.count_nonzero(assessment.is_flagged))
        print(f"scored {n} cases as of {as_of.isoformat()} (horizon {scores.horizon_days:g} days, "
              f"model version {scores.model_version}); {flagged} flagged"
              + (f"; {lost.n_cases} cannot be scored" if lost.n_cases else "") + f"; wrote {args.out}")
        print(ADVISORY_NOTICE)
    return report_unscorable(lost)


# ---------------------------------------------------------------- cases that cannot be scored
#: The flag a case that cannot be scored carries in every CSV (followed by ": <reason>").
CANNOT_BE_SCORED = "cannot_be_scored"


def unscorable_flags(lost) -> list:
    """The flags cell of each case that cannot be scored: ``cannot_be_scored: <reason>``."""
    return safe_text([f"{CANNOT_BE_SCORED}: {reason}" for reason in lost.reasons])


def merge_case_rows(columns: list, case_ids, extra: list, extra_ids) -> list:
    """Columns of two row sets merged into case-ID order (both sets already in that order)."""
    import numpy as np

    order = np.argsort(np.concatenate([np.asarray(case_ids, dtype=str), np.asarray(extra_ids, dtype=str)]),
                       kind="stable")
    return [np.asarray(list(a) + list(b), dtype=object)[order].tolist() for a, b in zip(columns, extra)]


def report_unscorable(lost, where: str = f"marked '{CANNOT_BE_SCORED}' in the output") -> int:
    """Name the cases that cannot be scored on stderr; the exit code (0 when every case was scored)."""
    from caseview.errors import EXIT_CASES_NOT_SCORED

    if not lost.n_cases:
        return 0
    print(f"caseview: {lost.summary()} ({where}; every other case was scored)", file=sys.stderr)
    return EXIT_CASES_NOT_SCORED


# ---------------------------------------------------------------- history
def run_history(args) -> int:
    from caseview.dates import to_day
    from caseview.operations.case_history import case_history

    as_of = as_of_date(args)
    with open_workspace(args.workspace) as ws:
        h = case_history(ws, args.case_id, None if as_of is None else to_day(as_of))
    model, n, scored = h.model, h.n_contacts, h.path is not None
    header = ["case_id", "date"]
    columns = [[h.case_id] * n, format_days(h.contact_days)]
    for channel in model.channels:
        header.append(channel.name)
        columns.append(list(h.raw_values[channel.name]))
    for k, name in enumerate(model.covariates):
        header.append(name)
        columns.append([f"{v:g}" for v in h.covariates[:, k]])
    if "stage_known" in h.raw_values:
        header.append("stage_known")
        columns.append(list(h.raw_values["stage_known"]))
    for s, stage in enumerate(model.stages):
        header.append(f"p_{stage}")
        columns.append(format_probabilities(h.smoothed[:, s]) if scored else [""] * n)
    header.append("path_stage")
    columns.append([model.stages[i] for i in h.path] if scored else [""] * n)
    write_table(args.out, header, columns)
    if args.out != "-":
        print(f"case {h.case_id}: {n} contacts (model version {h.version_id}); wrote {args.out}")
        print("path_stage is the most likely sequence of stages: an estimate, not a record.")
        print(ADVISORY_NOTICE)
    if h.reason:  # the recorded values, with blank probabilities and path; named on stderr, exit 4
        from caseview.errors import EXIT_CASES_NOT_SCORED

        print(f"caseview: case {args.case_id} cannot be scored: {h.reason} (its contacts are listed without "
              "probabilities)", file=sys.stderr)
        return EXIT_CASES_NOT_SCORED
    return 0


# ---------------------------------------------------------------- demo
def create_demo_workspace(path: Path, actor: str):
    """Create a workspace at ``path`` holding the invented demo model and caseload; returns the import result."""
    from caseview.storage import Workspace
    from caseview.timeline_io import import_timelines

    ws = Workspace.create(path, DEMO_MODEL.read_text(encoding="utf-8"), actor)
    try:
        report = import_timelines(ws, DEMO_TIMELINES, actor=actor)
    except BaseException:
        ws.close()
        if isinstance(path, Path):  # a database keeps its (empty) workspace; the import rolled back
            path.unlink(missing_ok=True)
        raise
    ws.close()
    return report


def run_demo(args) -> int:
    from caseview.errors import InputError

    from caseview.storage.location import workspace_location

    path = workspace_location(args.path)  # a file path or an empty PostgreSQL database's URL
    if isinstance(path, Path) and path.exists():
        raise InputError(f"{path}: already exists; choose a new path for the demo workspace")
    report = create_demo_workspace(path, actor_name(args))
    print(f"created demo workspace {path}: {report.cases_added} invented cases, {report.contacts_added} contacts")
    print("The demo caseload and model are invented (no real people or data). " + ADVISORY_NOTICE)
    today = dt.date.today().isoformat()
    print(f"next: caseview score {path} --as-of {today} --out scores.csv   (or: caseview gui {path})")
    return 0
