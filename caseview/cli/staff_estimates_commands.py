"""``caseview model-from-estimates``: a stage model from staff estimates (registered by :mod:`.fitting`)."""

from __future__ import annotations

from caseview import ADVISORY_NOTICE

from .options import actor_name, add_actor_option


def register(sub) -> None:
    p = sub.add_parser("model-from-estimates", help="build a stage model from staff estimates (typical stays, "
                                                    "next stages, how often checks are wrong)",
                       description="Turn a staff-estimate file (format caseview.staff-estimates; see README) into "
                                   "a stage model: rates from typical stays and where people go next, observation "
                                   "probabilities from how often each check result is wrong. Write it with --out "
                                   "(then 'caseview init WS --model MODEL.json'), and/or add it to an existing "
                                   "workspace with --workspace as a new model version, current for scoring. "
                                   "Without either, the file is checked and the model shown.")
    p.add_argument("estimates", metavar="ESTIMATES.json")
    p.add_argument("--out", metavar="MODEL.json", help="write the model file here")
    p.add_argument("--workspace", metavar="WS", help="add the model to this workspace as a new current version")
    add_actor_option(p)
    p.set_defaults(run=run_model_from_estimates)


def describe_model(model) -> str:
    """Plain-text lines: each stage's mean stay and where the next move goes (covariates at 0)."""
    rates = model.baseline_rate_matrix()
    lines = ["Mean time in stage and next stage (covariates at 0):"]
    width = max(len(s) for s in model.stages)
    for r, stage in enumerate(model.stages):
        out = rates[r].sum()
        if out == 0:
            lines.append(f"  {stage:<{width}}  never leaves")
            continue
        moves = ", ".join(f"{model.stages[s]} {rates[r, s] / out:.0%}" for s in range(model.n_stages) if rates[r, s])
        lines.append(f"  {stage:<{width}}  {1 / out:8.1f} days   next: {moves}")
    lines.append(f"{len(model.transitions)} transitions, {len(model.channels)} checks, "
                 f"{model.n_covariates} covariates")
    return "\n".join(lines)


def run_model_from_estimates(args) -> int:
    from caseview.modelfile import dump_model
    from caseview.staff_estimates_file import model_from_estimates_file

    from .basic import open_workspace

    model = model_from_estimates_file(args.estimates)
    text = dump_model(model, extra={"note": f"built from staff estimates in {args.estimates}"})
    print(describe_model(model))
    if args.out:
        from pathlib import Path

        from caseview.errors import InputError

        try:
            Path(args.out).write_text(text, encoding="utf-8")
        except OSError as exc:
            raise InputError(f"{args.out}: cannot write ({exc.strerror})") from None
        print(f"wrote {args.out}")
    if args.workspace:
        with open_workspace(args.workspace) as ws:
            version = ws.add_model_version(text, f"from staff estimates ({args.estimates})", actor_name(args),
                                           make_current=True)
        print(f"saved as model version {version} in {args.workspace} (now current for scoring)")
    if not args.out and not args.workspace:
        print("nothing written: give --out MODEL.json and/or --workspace WS")
    print(ADVISORY_NOTICE)
    return 0
