"""``caseview check-fit``: goodness of fit of the current model (registered by :mod:`.fitting`)."""

from __future__ import annotations

import sys

from caseview import ADVISORY_NOTICE

from .options import actor_name, add_actor_option, add_as_of_option, add_seed_option, as_of_date


def register(sub) -> None:
    p = sub.add_parser("check-fit", help="goodness of fit: observed versus expected changes between contacts",
                       description="Compare, for every pair of consecutive contacts of a case, the category "
                                   "recorded at the later contact with what the current model predicted from the "
                                   "evidence up to the earlier one; grouped by the earlier category, gap length "
                                   "and covariate pattern. Prints the table and a Pearson-type statistic with a "
                                   "parametric-bootstrap p-value (simulated caseloads; the statistic is not "
                                   "chi-squared). Nothing in the workspace changes except one audit entry. "
                                   + ADVISORY_NOTICE)
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--channel", metavar="NAME", help="check one observation channel (default: all, one statistic)")
    p.add_argument("--group-by", choices=("category", "stage"), default="category",
                   help="group pairs by the category recorded at the earlier contact (default) or the most likely "
                        "stage there")
    p.add_argument("--bootstrap", type=int, default=99, metavar="B",
                   help="simulated caseloads for the p-value (default 99; 0 = no p-value)")
    p.add_argument("--refit", action="store_true",
                   help="refit the model to every simulated caseload (accounts for estimation; much slower)")
    add_seed_option(p, "the simulations")
    p.add_argument("--gap-bands", type=int, default=3, metavar="N",
                   help="gap-length bands, cut at quantiles of the gaps (default 3)")
    p.add_argument("--no-covariate-groups", action="store_true", help="do not group pairs by covariate pattern")
    p.add_argument("--time-bins", type=int, default=12, metavar="N",
                   help="calendar-time bins for the occupancy table (default 12)")
    p.add_argument("--out", metavar="TABLE.csv", help="write the observed/expected table ('-' for standard output)")
    add_as_of_option(p, required=False, help="check against contacts on or before this date (default: every stored contact)")
    p.add_argument("--occupancy-out", metavar="OCC.csv",
                   help="write observed versus expected occupancy of each category over calendar time")
    add_actor_option(p)
    p.set_defaults(run=run_check_fit)


def _check_options(args) -> None:
    from caseview.errors import InputError

    if args.out == "-" and args.occupancy_out == "-":
        raise InputError("--out and --occupancy-out cannot both be '-' (standard output); give one a file name")


def run_check_fit(args) -> int:
    import numpy as np

    from caseview.errors import Cancelled, InputError
    from caseview.operations.fitting import FitCheckOptions, run_fit_check

    from .basic import format_days, open_workspace, stderr_progress, write_table

    _check_options(args)
    for option, value, least in (("--bootstrap", args.bootstrap, 0), ("--gap-bands", args.gap_bands, 1),
                                 ("--time-bins", args.time_bins, 1)):
        if value < least:
            raise InputError(f"{option}: expected a whole number >= {least}, got {value}")
    options = FitCheckOptions(channel=args.channel, group_by=args.group_by, gap_bands=args.gap_bands,
                              covariate_groups=not args.no_covariate_groups, bootstrap=args.bootstrap,
                              refit=args.refit, seed=args.seed, time_bins=args.time_bins)
    as_of = as_of_date(args)
    actor = actor_name(args)
    with open_workspace(args.workspace) as ws:
        progress = stderr_progress("checking fit")
        try:
            outcome = run_fit_check(ws, options, actor, as_of=as_of, callback=progress)
        except (KeyboardInterrupt, Cancelled):
            if sys.stderr.isatty():
                print(file=sys.stderr)
            raise KeyboardInterrupt from None
        if sys.stderr.isatty():
            print("\rchecking fit: done   ", file=sys.stderr)
        if outcome.inputs.entered_not_fitted:
            print(f"caseview: note: model version {outcome.inputs.version_id} was entered, not fitted; the check "
                  "compares the caseload with the values as entered", file=sys.stderr)
        result = outcome.result

        if args.out:
            write_table(args.out, ["channel", "from", "gap_band", "covariates", "to", "observed", "expected",
                                   "pearson_contribution"],
                        [result.channel, result.from_group, result.gap_band, result.covariate_group,
                         result.to_category, [f"{v:.0f}" for v in result.observed],
                         [f"{v:.4f}" for v in result.expected], [f"{v:.4f}" for v in result.contributions]])
        occupancy = result.occupancy
        if args.occupancy_out:
            n_series, n_bins = occupancy.observed.shape
            starts = format_days(np.floor(occupancy.bin_edges[:-1]))
            ends = format_days(np.floor(occupancy.bin_edges[1:]))
            number = lambda values: ["" if not np.isfinite(v) else f"{v:.4f}" for v in values.reshape(-1)]  # noqa: E731
            write_table(args.occupancy_out, ["channel", "category", "bin_start", "bin_end", "contacts",
                                             "observed_share", "expected_share", "standard_error"],
                        [np.repeat(occupancy.channel, n_bins).tolist(), np.repeat(occupancy.category, n_bins).tolist(),
                         starts * n_series, ends * n_series, [str(v) for v in occupancy.n_contacts.reshape(-1)],
                         number(occupancy.observed), number(occupancy.expected), number(occupancy.standard_error)])
    if args.out != "-":
        print(result.format_table())
        print(_occupancy_summary(occupancy))
    if args.out and args.out != "-":
        print(f"wrote {args.out}")
    if args.occupancy_out and args.occupancy_out != "-":
        print(f"wrote {args.occupancy_out}")
    print(ADVISORY_NOTICE, file=sys.stderr if args.out == "-" or args.occupancy_out == "-" else sys.stdout)
    return 0


def _occupancy_summary(occupancy) -> str:
    """One line per channel: how far observed shares stray from expected over calendar time."""
    import numpy as np

    z = occupancy.standardised_difference
    lines = ["", f"Occupancy over calendar time ({occupancy.observed.shape[1]} bins): observed versus expected share "
             "of each category, largest |observed - expected| / standard error"]
    for channel in dict.fromkeys(occupancy.channel):
        rows = [i for i, c in enumerate(occupancy.channel) if c == channel]
        worst = np.nanmax(np.abs(z[rows])) if np.isfinite(z[rows]).any() else float("nan")
        outside = int(np.sum(np.abs(z[rows]) > 2))
        total = int(np.isfinite(z[rows]).sum())
        lines.append(f"  {channel}: {worst:.1f} (beyond 2 in {outside} of {total} category-bins; about 5% expected "
                     "by chance)")
    return "\n".join(lines)
