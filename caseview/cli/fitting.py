"""``caseview fit`` and ``caseview models``: fit the stage model to the caseload, list and compare versions.

Both call the application layer (:mod:`caseview.operations.fitting`, :mod:`caseview.operations.model_comparison`),
the same functions the window calls.
"""

from __future__ import annotations

import sys

from caseview import ADVISORY_NOTICE

from .options import actor_name, add_actor_option, add_as_of_option, add_seed_option, as_of_date


def register(sub) -> None:
    p = sub.add_parser("fit", help="fit the stage model to the whole caseload (maximum likelihood)",
                       description="Fit every free value of the current model (rates, log hazard ratios, "
                                   "observation probabilities, initial distribution) to all cases by maximum "
                                   "likelihood with analytic gradients, and save it as a new model version.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--out", metavar="MODEL.json", help="also write the fitted model to this file")
    p.add_argument("--starts", type=int, default=3, metavar="N", help="seeded starting points (default 3)")
    add_seed_option(p, "the extra starts")
    p.add_argument("--penalised", action="store_true",
                   help="weakly informative priors for small caseloads (see README)")
    p.add_argument("--max-iterations", type=int, default=500, metavar="N")
    p.add_argument("--intervals", choices=("auto", "profile", "wald"), default="auto",
                   help="95%% intervals: profile likelihood or Wald (delta method); default auto = profile below "
                        "5,000 cases or when the observed information is ill-conditioned")
    p.add_argument("--calibration-draws", type=int, default=None, metavar="N",
                   help="refit N caseloads simulated from the fitted model to calibrate the intervals' width "
                        "(default 40 below 5,000 cases, where uncalibrated intervals were measured too narrow; "
                        "0 turns it off; each draw is a whole fit)")
    add_as_of_option(p, required=False, help="fit to contacts on or before this date (default: every stored contact)")
    p.add_argument("--keep-current", action="store_true",
                   help="store the fitted version without making it current (make it current later with "
                        "'models --use')")
    add_actor_option(p)
    p.set_defaults(run=run_fit)

    p = sub.add_parser("models", help="list model versions; compare two; choose the current one",
                       description="Without options: list the workspace's model versions. --compare A B: "
                                   "AIC/BIC difference of two fitted versions and, when one is nested in the other, "
                                   "a likelihood-ratio test (chi-squared; --bootstrap B for a parametric-bootstrap "
                                   "p-value). Penalised fits are refused. --use ID: make a version current for scoring.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--compare", nargs=2, type=int, metavar=("A", "B"))
    p.add_argument("--bootstrap", type=int, default=0, metavar="B",
                   help="with --compare: parametric-bootstrap p-value from B caseloads simulated from the "
                        "restricted fit (both models refitted to each; slow)")
    add_seed_option(p, "--bootstrap")
    p.add_argument("--use", type=int, metavar="ID")
    add_actor_option(p)
    p.set_defaults(run=run_models)

    from .staff_estimates_commands import register as register_staff_estimates

    register_staff_estimates(sub)   # model-from-estimates

    from .fit_check_commands import register as register_fit_check

    register_fit_check(sub)   # check-fit


def run_fit(args) -> int:
    from caseview.errors import Cancelled
    from caseview.modelfile import save_model
    from caseview.operations.fitting import FitOptions, compute_fit, fit_inputs, save_fit

    from .basic import open_workspace, stderr_progress

    options = FitOptions(starts=args.starts, seed=args.seed, penalised=args.penalised, intervals=args.intervals,
                         max_iterations=args.max_iterations, calibration_draws=args.calibration_draws)
    options.check()
    as_of = as_of_date(args)
    actor = actor_name(args)
    if args.out:  # before the (long) fit: never a saved version and then a failed --out
        from caseview.private_files import ensure_can_write

        ensure_can_write(args.out)
    with open_workspace(args.workspace) as ws:
        progress = stderr_progress("fitting")
        try:
            outcome = compute_fit(fit_inputs(ws, as_of), options, callback=progress)
        except (KeyboardInterrupt, Cancelled):
            if sys.stderr.isatty():
                print(file=sys.stderr)
            raise KeyboardInterrupt from None
        if sys.stderr.isatty():
            print("\rfitting: done   ", file=sys.stderr)
        summary = outcome.summary
        with ws.transaction():  # the version and the --out file: both or neither
            saved = save_fit(ws, outcome, actor, make_current=not args.keep_current)
            if args.out:
                save_model(saved.model, args.out,
                           extra={"fit": {"log_likelihood": summary.log_likelihood, "aic": summary.aic,
                                          "bic": summary.bic, "n_parameters": summary.n_parameters,
                                          "n_cases": summary.n_cases, "converged": summary.converged,
                                          "intervals": summary.interval_kind}})
    print(summary.format_table())
    start = summary.fitted_from_version
    if saved.made_current:
        print(f"\nsaved as model version {saved.version_id} (now current for scoring; version {start} kept)")
    else:
        print(f"\nsaved as model version {saved.version_id}; version {start} is still current "
              f"('caseview models {args.workspace} --use {saved.version_id}' makes the new one current)")
    if args.out:
        print(f"wrote {args.out}")
    print(ADVISORY_NOTICE)
    return 0 if summary.converged else 1


def run_models(args) -> int:
    from caseview.errors import InputError
    from caseview.operations.fitting import make_version_current

    from .basic import open_workspace

    with open_workspace(args.workspace) as ws:
        versions = {v.id: v for v in ws.model_versions()}
        if args.use is not None:
            if args.use not in versions:
                raise InputError(f"--use: no model version {args.use} (versions: {', '.join(map(str, versions))})")
            make_version_current(ws, args.use, actor_name(args))
            print(f"model version {args.use} is now current for scoring")
            return 0
        if args.compare:
            return _print_comparison(ws, args)
        if args.bootstrap:
            raise InputError("--bootstrap: only with --compare A B")
        print(f"{'id':>4}  {'created (UTC)':<20}  {'current':<7}  {'logL':>12}  {'AIC':>10}  {'BIC':>10}  note")
        for v in versions.values():
            print(f"{v.id:>4}  {v.created_utc[:19]:<20}  {'yes' if v.is_current else '':<7}  {_numbers(v)}  {v.note}")
    return 0


def _numbers(version) -> str:
    """logL, AIC and BIC columns of one version ('-' when entered, not fitted or not finite)."""
    from caseview.errors import InputError
    from caseview.operations.fitting import stored_fit_failed, stored_fit_summary

    if stored_fit_failed(version):
        return f"{'failed':>12}  {'-':>10}  {'-':>10}"
    try:
        fit = stored_fit_summary(version)
    except InputError:
        return f"{'unreadable':>12}  {'-':>10}  {'-':>10}"
    if fit is None:
        return f"{'-':>12}  {'-':>10}  {'-':>10}"
    cell = lambda value, width, places: f"{value:>{width}.{places}f}" if value is not None else f"{'-':>{width}}"  # noqa: E731
    text = f"{cell(fit.log_likelihood, 12, 2)}  {cell(fit.aic, 10, 1)}  {cell(fit.bic, 10, 1)}"
    return text + ("  (penalised)" if fit.penalised else "")


def _print_comparison(ws, args) -> int:
    from caseview.operations.model_comparison import compare_versions

    from .basic import stderr_progress

    c = compare_versions(ws, *args.compare, bootstrap=args.bootstrap, seed=args.seed,
                         callback=stderr_progress("bootstrap") if args.bootstrap else None)
    if args.bootstrap and sys.stderr.isatty():
        print("\rbootstrap: done   ", file=sys.stderr)
    for vid, s in ((c.first, c.first_summary), (c.second, c.second_summary)):
        print(f"version {vid}: logL {s.log_likelihood:.3f}, {s.n_parameters} parameters, AIC {s.aic:.2f}, "
              f"BIC {s.bic:.2f}")
    print(f"difference (second - first): AIC {c.aic_difference:+.2f}, BIC {c.bic_difference:+.2f} "
          "(negative favours the second)")
    if not c.nested:
        print(f"likelihood-ratio test refused: the versions are not nested ({c.not_nested_reason}); "
              "compare AIC/BIC instead")
        return 0
    print(f"nested: version {c.restricted} is version {c.general} with {len(c.extra_parameters)} parameter"
          f"{'s' if len(c.extra_parameters) != 1 else ''} held fixed ({'; '.join(c.extra_parameters)})")
    print(f"likelihood-ratio test: statistic {c.statistic:.3f} on {c.df} df, chi-squared p = "
          f"{c.chi_squared_p_value:.4g}")
    if c.boundary_parameters:
        print(f"caution: the restriction holds {'; '.join(c.boundary_parameters)} at 0, on the boundary of the "
              "parameter space; the chi-squared p-value is then conservative (too large; the reference is a "
              "chi-bar-squared mixture, Self & Liang 1987)"
              + ("" if c.bootstrap_p_value is not None else "; use --bootstrap B for a parametric-bootstrap "
                 "p-value"))
    if c.bootstrap_p_value is not None:
        print(f"parametric bootstrap: p = {c.bootstrap_p_value:.4g} from {c.bootstrap_replicates} caseloads "
              f"simulated from version {c.restricted} at the observed contact times (seed {c.seed})")
    return 0
