"""Time opening a workspace in the window's caseload table, sorting and filtering (fresh process).

Uses :func:`caseview.gui.timing.measure_open_sort_filter` (offscreen Qt) and prints its dict as
one JSON line, plus ``window_open`` = open the workspace + load and score (the window's worker job)
+ build the table model and view and paint it: the time from asking for the workspace until the
data is on screen.

Run::

    python benchmarks/gui_timing.py WORKSPACE --as-of 2027-12-14
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import sys


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("workspace")
    parser.add_argument("--as-of", required=True, metavar="YYYY-MM-DD")
    parser.add_argument("--horizon", type=float, default=90.0)
    parser.add_argument("--part", choices=("table", "window"), default="table",
                        help="table: open, sort and filter the caseload table (default); window: the whole "
                             "MainWindow until table, risk queue and selected case are shown, then the longest "
                             "stall of its main thread while the reasons arrive")
    args = parser.parse_args(argv)
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from caseview.gui.timing import measure_open_sort_filter, measure_window

    as_of = dt.date.fromisoformat(args.as_of)
    if args.part == "window":   # its own process, so that its peak memory is the window's alone
        result = measure_window(args.workspace, as_of, args.horizon)
    else:
        result = measure_open_sort_filter(args.workspace, as_of, args.horizon)
        result["window_open"] = result["open_workspace"] + result["score"] + result["open_table"]
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
