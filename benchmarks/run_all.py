"""Run every caseview benchmark in one go and print the table (ratios against hmmlearn, targets, memory).

Every measured command runs in a fresh process, one at a time (``benchmarks/measure.py``): the
time is wall-clock time of the whole command including its start-up, the memory is that process's
peak resident set size. The hmmlearn reference runs in a fresh process too
(``benchmarks/reference_hmmlearn.py``); its time covers only the library calls, its memory the
whole process. See benchmarks/README.md for what each figure means.

Run::

    python benchmarks/run_all.py                 # full sizes (100,000 and 1,000,000 cases; fits on 3,000 and 10,000)
    python benchmarks/run_all.py --skip-large    # 100,000 cases only
    python benchmarks/run_all.py --quick         # small sizes, a few minutes, a smoke run
    python benchmarks/run_all.py --skip-gui --skip-fit --cases 20000
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import re
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

from measure import Measured, run_measured  # noqa: E402
from report import Row, render_results, render_table  # noqa: E402
import postgres_parts  # noqa: E402
import scale_parts  # noqa: E402

PYTHON = sys.executable
MEMORY_TARGET_MB = 1024.0


def caseview_command() -> list:
    script = Path(PYTHON).with_name("caseview")
    return [str(script)] if script.exists() else [PYTHON, "-m", "caseview"]


def available_commands() -> set:
    done = subprocess.run(caseview_command() + ["--help"], capture_output=True, text=True)
    return set(re.findall(r"^\s{4}([a-z][\w-]*)\s", done.stdout, flags=re.M))


def gui_timing_available() -> bool:
    done = subprocess.run([PYTHON, "-c", "import caseview.gui.timing"], capture_output=True,
                          env={**os.environ, "QT_QPA_PLATFORM": "offscreen"})
    return done.returncode == 0


def log(message: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {message}", flush=True)


def generate(cases: int, layout: str, out: Path, seed: int, covariates: str = "constant", **models) -> dict:
    command = [PYTHON, str(HERE / "generate.py"), "--cases", str(cases), "--layout", layout, "--out", str(out),
               "--seed", str(seed), "--covariates", covariates]
    for option, path in models.items():
        command += [f"--{option.replace('_', '-')}", str(path)]
    done = subprocess.run(command, capture_output=True, text=True, check=True)
    summary = json.loads(done.stdout.strip().splitlines()[-1])
    log(f"generated {summary['cases']:,} cases, {summary['contacts']:,} contacts ({layout}) "
        f"in {summary['seconds']:.1f} s -> {out.name}")
    return summary


def demo_model() -> dict:
    from generate import demo_model_json

    return demo_model_json(True, True)


def last_date_of(csv: Path) -> str:
    """The latest contact date in a generated CSV (its ``date`` column)."""
    import pandas as pd

    return str(pd.read_csv(csv, usecols=["date"])["date"].max())


def gui_rows(ctx, n: int, ws: Path, as_of: str, measured: dict) -> None:
    """Sort and filter from the window's open, then the whole window in a process of its own."""
    figures, peak = measured["gui_figures"], measured["gui_peak_mb"]
    log("timing the whole window (open until shown, stalls while reasons arrive)")
    whole = run_measured([PYTHON, str(HERE / "gui_timing.py"), str(ws), "--as-of", as_of, "--part", "window"])
    shown = whole.last_json_line()
    if whole.ok and shown:
        ctx.rows.append(Row(f"whole window: open {n:,}-case workspace until table, risk queue and selected case are "
                            "shown", shown["window_shown"], None, "<= 3 s", whole.peak_mb, limit=3.0))
        ctx.rows.append(Row("whole window: longest main-thread stall while reasons arrive", shown["longest_stall"],
                            None, "(no target; < 0.1 s feels instant)", whole.peak_mb))
        ctx.notes.append(f"whole window: reasons for every flagged case done {shown['reasons_done']:.2f} s after "
                         f"asking; {shown['stalls_over_100ms']} main-thread stalls over 0.1 s")
    else:
        ctx.missing.append(f"whole-window timing failed: {whole.problem() or 'no figures printed'}")
    ctx.rows.append(Row("window: sort the table (slowest of 5 columns x 2 directions)", figures["sort_max"], None,
                        "<= 0.1 s", peak, limit=0.1))
    ctx.rows.append(Row("window: filter the table (slowest of coordinator / search / flagged / clear)",
                        figures["filter_max"], None, "<= 0.1 s", peak, limit=0.1))
    parts = ", ".join(f"{k} {v:.3f} s" for k, v in figures.items() if isinstance(v, float))
    ctx.notes.append(f"window breakdown ({n:,} cases): {parts}")


def middle_case(n: int) -> str:
    """The case code of the middle case of a generated caseload of ``n`` cases."""
    from generate import case_codes

    return str(case_codes(n)[n // 2])


def make_workspace(ws: Path, model: Path, csv: Path, notes: list | None = None) -> Measured:
    """``caseview init`` (untimed) then ``caseview import`` (measured)."""
    cv = caseview_command()
    if ws.exists():
        ws.unlink()
    init = subprocess.run(cv + ["init", str(ws), "--model", str(model)], capture_output=True, text=True)
    if init.returncode:
        raise RuntimeError(f"caseview init failed: {init.stderr.strip()}")
    imported = run_measured(cv + ["import", str(ws), str(csv)])
    if not imported.ok:
        raise RuntimeError(f"caseview import {csv.name} failed: {imported.problem()}")
    return imported


def score_cross_check(scores_csv: Path, posterior_npy: Path, stages: list) -> float:
    """Largest |caseview p_now - hmmlearn posterior at the last contact| over all cases and stages."""
    import numpy as np
    import pandas as pd

    frame = pd.read_csv(scores_csv).sort_values("case_id")
    ours = frame[[f"p_{s}" for s in stages]].to_numpy(dtype=float)
    reference = np.load(posterior_npy)
    if ours.shape != reference.shape:
        return float("inf")
    return float(np.abs(ours - reference).max())


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=100_000, help="cases for score, import and window (default 100000)")
    parser.add_argument("--large-cases", type=int, default=1_000_000,
                        help="the large caseload: import, score, flags, history, window open, 1-start fit (default "
                             "1000000); --skip-large leaves it out")
    parser.add_argument("--large-csv", type=Path, help="reuse this generated irregular CSV of --large-cases cases")
    parser.add_argument("--fit-cases", default="3000,10000", help="comma-separated fit sizes (default 3000,10000)")
    parser.add_argument("--n-iter", type=int, default=100, help="hmmlearn EM iterations (default 100)")
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--quick", action="store_true", help="small sizes (5000 and 20000 cases, fit on 300): a smoke run")
    for part in ("score", "fit", "import", "gui", "irregular-score", "two-channel", "large", "fit-one-start",
                 "postgres"):
        parser.add_argument(f"--skip-{part}", action="store_true")
    parser.add_argument("--command-timeout", type=float, default=0.0,
                        help="stop a measured command after this many seconds and report it failed (default: never)")
    parser.add_argument("--workdir", type=Path, help="where data and workspaces go (default: a temporary directory)")
    parser.add_argument("--keep", action="store_true", help="keep the work directory")
    parser.add_argument("--results", type=lambda text: Path(text) if text else None, default=HERE / "results.md",
                        help="markdown file for the table (default benchmarks/results.md; '' for none)")
    args = parser.parse_args(argv)
    if args.quick:
        args.cases = min(args.cases, 5000)
        args.large_cases = min(args.large_cases, 20_000)
        args.fit_cases = "300"
    fit_sizes = [int(x) for x in args.fit_cases.split(",") if x.strip()]
    import measure

    measure.TIMEOUT_SECONDS = args.command_timeout
    command_line = "python benchmarks/run_all.py " + " ".join(shlex.quote(a) for a in (argv or sys.argv[1:]))

    work = args.workdir or Path(tempfile.mkdtemp(prefix="caseview-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    os.environ["QT_QPA_PLATFORM"] = "offscreen"
    # an installed caseview has its bytecode compiled; without this every measured command would compile
    # caseview's modules from source again (about 0.3 s of each start-up on the shared machine)
    os.environ.pop("PYTHONDONTWRITEBYTECODE", None)
    commands = available_commands()
    log(f"caseview commands available: {', '.join(sorted(commands)) or 'none'}; work directory {work}")
    load_before = os.getloadavg()
    rows: list[Row] = []
    notes: list[str] = []
    missing: list[str] = []
    cv = caseview_command()
    n = args.cases
    ctx = SimpleNamespace(python=PYTHON, here=HERE, work=work, seed=args.seed, cv=cv, rows=rows, notes=notes,
                          missing=missing, log=log, generate=generate, make_workspace=make_workspace,
                          middle_case=lambda ws: middle_case(int(ws.stem.rsplit("_", 1)[-1])))

    def need(*names) -> bool:
        absent = [c for c in names if c not in commands]
        if absent:
            missing.append(f"`caseview {' / '.join(absent)}` not available yet")
        return not absent

    server = postgres_parts.PostgresServer(ctx)   # started on first use, stopped at the end
    try:
        # ------------------------------------------------ score vs hmmlearn (equal gaps; two channels)
        if not args.skip_score and need("init", "import", "score"):
            scale_parts.score_against_hmmlearn(ctx, n, "equal", "x 12 contacts, equal 30-day gaps, 3 channels "
                                                                "(27 symbols), 2 covariates")
        if not args.skip_two_channel and need("init", "import", "score"):
            scale_parts.score_against_hmmlearn(ctx, n, "two-channel", "x 6-18 contacts, equal 30-day gaps, "
                                                                      "2 channels (6 symbols), no covariates")
        # ------------------------------------------------ one irregular caseload at two sizes
        small_seconds, large_seconds = {}, {}
        if not (args.skip_import and args.skip_gui and args.skip_irregular_score) and need("init", "import"):
            irregular = generate(n, "irregular", work / "irregular.csv", args.seed, model_out=work / "demo_model.json")
            irregular_ws = work / f"irregular_{n}.cvw"
            log("timing caseview import (irregular gaps)")
            imported = make_workspace(irregular_ws, work / "demo_model.json", work / "irregular.csv", notes)
            notes.append("import said: " + " / ".join(imported.stdout.strip().splitlines()))
            small_seconds = scale_parts.caseload_commands(
                ctx, n, irregular_ws, irregular["last_day"], MEMORY_TARGET_MB,
                None if args.skip_import else imported, fit=not args.skip_fit_one_start, window=not args.skip_gui)
            if "gui_figures" in small_seconds:
                gui_rows(ctx, n, irregular_ws, irregular["last_day"], small_seconds)
            if not args.skip_postgres:
                postgres_parts.postgres_rows(ctx, server, n, work / "irregular.csv", work / "demo_model.json",
                                             middle_case(n), irregular["last_day"], small_seconds, MEMORY_TARGET_MB,
                                             fit=not args.skip_fit_one_start, window=not args.skip_gui)
        if not args.skip_large and need("init", "import"):
            large = args.large_cases
            csv = args.large_csv or work / "irregular_large.csv"
            if args.large_csv is None or not csv.exists():
                data = generate(large, "irregular", csv, args.seed, model_out=work / "demo_model.json")
                last_day = data["last_day"]
            else:
                last_day = last_date_of(csv)
                (work / "demo_model.json").write_text(json.dumps(demo_model()), encoding="utf-8")
            large_ws = work / f"irregular_{large}.cvw"
            log(f"timing caseview import ({large:,} cases)")
            imported = make_workspace(large_ws, work / "demo_model.json", csv)
            large_seconds = scale_parts.caseload_commands(
                ctx, large, large_ws, last_day, scale_parts.LARGE_MEMORY_MB, imported,
                fit=not args.skip_fit_one_start, window=not args.skip_gui)
            scale_parts.growth_rows(ctx, n, large, small_seconds, large_seconds)
            if not args.skip_postgres:
                postgres_parts.postgres_rows(ctx, server, large, csv, work / "demo_model.json", middle_case(large),
                                             last_day, large_seconds, scale_parts.LARGE_MEMORY_MB,
                                             fit=not args.skip_fit_one_start, window=not args.skip_gui)


        # ------------------------------------------------ fit vs hmmlearn EM
        if not args.skip_fit:
            have_fit = need("init", "import", "fit")
            for m in fit_sizes:
                csv = work / f"fit_{m}.csv"
                data = generate(m, "equal", csv, args.seed + m, covariates="zero", model_out=work / "fit_truth.json",
                                start_model_out=work / "fit_start.json")
                fitted = None
                if have_fit:
                    ws = work / f"fit_{m}.cvw"
                    make_workspace(ws, work / "fit_start.json", csv, notes)
                    log(f"timing caseview fit ({m:,} cases)")
                    # hmmlearn's EM gives no intervals: leave out the calibration refits (README, Fitting the model)
                    fitted = run_measured(cv + ["fit", str(ws), "--calibration-draws", "0"])
                log(f"timing hmmlearn EM ({m:,} cases, n_iter={args.n_iter}, tol=1e-4)")
                reference = run_measured([PYTHON, str(HERE / "reference_hmmlearn.py"), "fit", "--arrays",
                                          data["arrays"], "--model", str(work / "fit_start.json"),
                                          "--n-iter", str(args.n_iter), "--tol", "1e-4"])
                ref = reference.last_json_line()
                if not reference.ok:
                    missing.append(f"hmmlearn EM at {m} failed: {reference.problem()}")
                    continue
                target = "ratio <= 0.5" if m == fit_sizes[0] else "(no target)"
                label = f"`caseview fit` vs hmmlearn EM, {m:,} cases x 12, equal 30-day gaps"
                ref_note = (f"fit {m:,}: hmmlearn EM ran {ref['iterations']} iterations (converged flag "
                            f"{ref['converged']}), final log-likelihood {ref['log_likelihood']:.3f}")
                if fitted is not None and fitted.ok:
                    rows.append(Row(label, fitted.seconds, ref["seconds"], target, fitted.peak_mb, reference.peak_mb,
                                    ratio_limit=0.5 if target.startswith("ratio") else None,
                                    cpu_seconds=fitted.cpu_seconds, reference_cpu_seconds=ref.get("cpu_seconds")))
                    wanted = ("log-likelihood", "iterations", "converged")
                    tail = " | ".join([line.strip() for line in fitted.stdout.splitlines()
                                       if line.strip().startswith(wanted)] or fitted.stdout.strip().splitlines()[-3:])
                    notes.append(f"{ref_note}; caseview fit said: {tail}")
                else:
                    rows.append(Row(label + " (caseview fit NOT MEASURED)", None, ref["seconds"], target, None,
                                    reference.peak_mb, ratio_limit=0.5 if target.startswith("ratio") else None))
                    notes.append(ref_note)
                    if fitted is not None:
                        missing.append(f"caseview fit at {m} failed: {fitted.problem()}")
    finally:
        server.stop()
        if not args.keep and not args.workdir:
            shutil.rmtree(work, ignore_errors=True)

    quick = " (quick run: sizes are below the targets' sizes)" if args.quick else ""
    table = render_table(rows, MEMORY_TARGET_MB)
    print()
    print(table)
    for note in notes:
        print(f"- {note}")
    for item in missing:
        print(f"- NOT MEASURED: {item}")
    context = (f"{dt.datetime.now().strftime('%Y-%m-%d %H:%M')}, {platform.node()}, {os.cpu_count()} cores, "
               f"Python {platform.python_version()}, load average before the run "
               f"{load_before[0]:.2f}/{load_before[1]:.2f}/{load_before[2]:.2f}{quick}")
    if args.results is not None:
        args.results.write_text(render_results(table, notes, missing, command_line, context), encoding="utf-8")
        print(f"\nwrote {args.results}")
    return 0 if all(r.passed() is not False for r in rows) and not missing else 1


if __name__ == "__main__":
    sys.exit(main())
