"""``caseview fit`` and ``caseview models``: fit the stage model to the caseload, list and compare versions."""

from __future__ import annotations

import sys
from types import SimpleNamespace

from caseview import ADVISORY_NOTICE

from .basic import add_actor_option


def register(sub) -> None:
    p = sub.add_parser("fit", help="fit the stage model to the whole caseload (maximum likelihood)",
                       description="Fit every free value of the current model (rates, log hazard ratios, "
                                   "observation probabilities, initial distribution) to all cases by maximum "
                                   "likelihood with analytic gradients, and save it as a new model version.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--out", metavar="MODEL.json", help="also write the fitted model to this file")
    p.add_argument("--starts", type=int, default=3, metavar="N", help="seeded starting points (default 3)")
    p.add_argument("--seed", type=int, default=1, metavar="S", help="seed for the extra starts (default 1)")
    p.add_argument("--penalised", action="store_true",
                   help="weakly informative priors for small caseloads (see README)")
    p.add_argument("--max-iterations", type=int, default=500, metavar="N")
    add_actor_option(p)
    p.set_defaults(run=run_fit)

    p = sub.add_parser("models", help="list model versions; compare two; choose the current one",
                       description="Without options: list the workspace's model versions. --compare A B: "
                                   "likelihood-ratio test (when nested) and AIC/BIC difference of two fitted "
                                   "versions. --use ID: make a version current for scoring.")
    p.add_argument("workspace", metavar="WS")
    p.add_argument("--compare", nargs=2, type=int, metavar=("A", "B"))
    p.add_argument("--use", type=int, metavar="ID")
    add_actor_option(p)
    p.set_defaults(run=run_models)

    from .staff_estimates_commands import register as register_staff_estimates

    register_staff_estimates(sub)   # model-from-estimates

    from .fit_check_commands import register as register_fit_check

    register_fit_check(sub)   # check-fit


def run_fit(args) -> int:
    import numpy as np

    from caseview.errors import Cancelled, InputError
    from caseview.modelfile import dump_model, save_model
    from hmm.fitting import fit_model

    from .basic import actor_name, open_workspace, stderr_progress

    if args.starts < 1:
        raise InputError(f"--starts: expected a whole number >= 1, got {args.starts}")
    actor = actor_name(args)
    if args.out:  # before the (long) fit: never a saved version and then a failed --out
        from caseview.private_files import ensure_can_write

        ensure_can_write(args.out)
    with open_workspace(args.workspace) as ws:
        model, version = ws.current_model()
        caseload = ws.load_caseload(model)
        if caseload.timelines.n_cases == 0:
            raise InputError(f"{args.workspace}: no contacts to fit; import timelines first")
        progress = stderr_progress("fitting")

        try:
            result = fit_model(model, caseload.timelines, starts=args.starts, rng=np.random.default_rng(args.seed),
                               penalised=args.penalised, callback=progress, max_iterations=args.max_iterations)
        except (KeyboardInterrupt, Cancelled):
            if sys.stderr.isatty():
                print(file=sys.stderr)
            raise KeyboardInterrupt from None
        if sys.stderr.isatty():
            print("\rfitting: done   ", file=sys.stderr)
        summary = result.to_summary()
        summary["fitted_from_version"] = version.id
        note = (f"fitted to {result.n_cases} cases from version {version.id}"
                + (" (penalised)" if args.penalised else "")
                + ("" if result.converged else " - DID NOT CONVERGE"))
        with ws.transaction():  # the version and the --out file: both or neither
            new_id = ws.add_model_version(dump_model(result.model), note, actor, fit_summary=summary,
                                          make_current=True)
            if args.out:
                save_model(result.model, args.out, extra={"fit": {k: summary[k] for k in
                                                                   ("log_likelihood", "aic", "bic", "n_parameters",
                                                                    "n_cases", "converged")}})
    print(result.format_table())
    print(f"\nsaved as model version {new_id} (now current for scoring; version {version.id} kept)")
    if args.out:
        print(f"wrote {args.out}")
    print(ADVISORY_NOTICE)
    return 0 if result.converged else 1


def _summary_fit(version):
    s = version.fit_summary or {}
    if "log_likelihood" not in s:
        return None
    return SimpleNamespace(log_likelihood=s["log_likelihood"], n_parameters=s["n_parameters"],
                           n_cases=s.get("n_cases"), n_contacts=s.get("n_contacts"), aic=s["aic"], bic=s["bic"],
                           names=set(s.get("free_parameters", [])))


def run_models(args) -> int:
    from caseview.errors import InputError
    from hmm.fitting.compare import information_criteria_difference, likelihood_ratio_test

    from .basic import actor_name, open_workspace

    with open_workspace(args.workspace) as ws:
        versions = {v.id: v for v in ws.model_versions()}
        if args.use is not None:
            if args.use not in versions:
                raise InputError(f"--use: no model version {args.use} (versions: {', '.join(map(str, versions))})")
            ws.set_current_model(args.use, actor_name(args))
            print(f"model version {args.use} is now current for scoring")
            return 0
        if args.compare:
            fits = []
            for vid in args.compare:
                if vid not in versions:
                    raise InputError(f"--compare: no model version {vid}")
                fit = _summary_fit(versions[vid])
                if fit is None:
                    raise InputError(f"--compare: model version {vid} was not fitted (no log-likelihood to compare)")
                fits.append(fit)
            a, b = fits
            diff = information_criteria_difference(a, b)
            print(f"version {args.compare[0]}: logL {a.log_likelihood:.3f}, {a.n_parameters} parameters, "
                  f"AIC {a.aic:.2f}, BIC {a.bic:.2f}")
            print(f"version {args.compare[1]}: logL {b.log_likelihood:.3f}, {b.n_parameters} parameters, "
                  f"AIC {b.aic:.2f}, BIC {b.bic:.2f}")
            print(f"difference (second - first): AIC {diff['aic']:+.2f}, BIC {diff['bic']:+.2f} "
                  "(negative favours the second)")
            restricted, general = (a, b) if a.n_parameters < b.n_parameters else (b, a)
            nested = restricted.names <= general.names and restricted.n_parameters < general.n_parameters
            if nested:
                try:
                    test = likelihood_ratio_test(restricted, general)
                except ValueError as exc:
                    print(f"likelihood-ratio test not possible: {exc}")
                else:
                    print(f"likelihood-ratio test: statistic {test.statistic:.3f} on {test.df} df, "
                          f"p = {test.p_value:.4g} (chi-squared reference; nested models on the same data)")
            else:
                print("likelihood-ratio test not applicable: the free parameters of one model are not a subset "
                      "of the other's; compare AIC/BIC instead")
            return 0
        print(f"{'id':>4}  {'created (UTC)':<20}  {'current':<7}  {'logL':>12}  {'AIC':>10}  {'BIC':>10}  note")
        for v in versions.values():
            fit = _summary_fit(v)
            numbers = (f"{fit.log_likelihood:>12.2f}  {fit.aic:>10.1f}  {fit.bic:>10.1f}" if fit else
                       f"{'-':>12}  {'-':>10}  {'-':>10}")
            print(f"{v.id:>4}  {v.created_utc[:19]:<20}  {'yes' if v.is_current else '':<7}  {numbers}  {v.note}")
    return 0
