"""The issue-19 parts of ``run_all.py``: score against hmmlearn on two caseloads, one caseload at two sizes
(import, score, flags, history, window open, a 1-start fit, each with time and peak memory) and the growth
of the score and open times from the smaller size to the larger one. The same commands on PostgreSQL:
``postgres_parts.py``.

Each function appends :class:`report.Row` objects and notes to the lists it is given; a command that fails
is reported as NOT MEASURED (the rest still runs).
"""

from __future__ import annotations

import json
import re
import subprocess
from pathlib import Path

from measure import run_measured
from report import Row

#: Peak memory target of every command at a million cases (issue 19).
LARGE_MEMORY_MB = 4096.0
#: ``caseview history`` target, whole command (issue 19 item 4).
HISTORY_LIMIT_S = 0.3
#: A command this short is run this many times and its median run reported (one run of a 0.3 s command on
#: the shared machine can be twice as long as the next).
HISTORY_RUNS = 5
#: ``caseview score`` against hmmlearn's score + predict_proba (issue 19 item 1).
SCORE_RATIO_LIMIT = 0.35
#: ``caseview fit`` with one start on the 100,000-case irregular workspace (issue 19 item 2).
FIT_LIMIT_S = 30.0


def score_cross_check(scores_csv: Path, posterior_npy: Path, stages: list, as_of: str) -> tuple[float, int]:
    """Largest |caseview p_now - hmmlearn posterior at the last contact| over the cases whose last contact is
    on the as-of date (for them filtered = smoothed = now), and how many cases that is."""
    import numpy as np
    import pandas as pd

    frame = pd.read_csv(scores_csv).sort_values("case_id")
    reference = np.load(posterior_npy)
    if len(frame) != reference.shape[0]:
        return float("inf"), 0
    same_day = (frame["last_contact"] == as_of).to_numpy()
    ours = frame[[f"p_{s}" for s in stages]].to_numpy(dtype=float)
    if not same_day.any():
        return float("nan"), 0
    return float(np.abs(ours[same_day] - reference[same_day]).max()), int(same_day.sum())


def score_against_hmmlearn(ctx, n: int, layout: str, label: str) -> None:
    """``caseview score`` (whole command) against hmmlearn's in-process score + predict_proba, same data."""
    python, here, work = ctx.python, ctx.here, ctx.work
    data = ctx.generate(n, layout, work / f"{layout}.csv", ctx.seed, model_out=work / f"{layout}_model.json")
    ws = work / f"{layout}.cvw"
    ctx.make_workspace(ws, work / f"{layout}_model.json", work / f"{layout}.csv")
    ctx.log(f"timing caseview score ({label})")
    scores_csv = work / f"{layout}_scores.csv"
    scored = run_measured(ctx.cv + ["score", str(ws), "--as-of", data["last_day"], "--out", str(scores_csv)])
    ctx.log(f"timing hmmlearn score + predict_proba ({label})")
    posterior = work / f"{layout}_hmmlearn_posterior.npy"
    reference = run_measured([python, str(here / "reference_hmmlearn.py"), "score", "--arrays", data["arrays"],
                              "--model", str(work / f"{layout}_model.json"), "--posterior-out", str(posterior)])
    ref = reference.last_json_line()
    if not (scored.ok and reference.ok):
        ctx.missing.append(f"score comparison ({label}) failed: {scored.problem() or reference.problem()}")
        return
    ctx.rows.append(Row(f"`caseview score` vs hmmlearn `score`+`predict_proba`, {n:,} cases, {label}",
                        scored.seconds, ref["seconds"], f"ratio <= {SCORE_RATIO_LIMIT}", scored.peak_mb,
                        reference.peak_mb, ratio_limit=SCORE_RATIO_LIMIT, cpu_seconds=scored.cpu_seconds,
                        reference_cpu_seconds=ref.get("cpu_seconds")))
    stages = json.loads((work / f"{layout}_model.json").read_text())["stages"]
    diff, compared = score_cross_check(scores_csv, posterior, stages, data["last_day"])
    ctx.notes.append(f"score cross-check ({label}): max |caseview p_now - hmmlearn posterior at last contact| = "
                     f"{diff:.1e} over the {compared:,} cases seen on the as-of date (CSV has 6 decimals); hmmlearn "
                     f"used {ref['groups']} model(s), total log-likelihood {ref['log_likelihood']:.3f}")


def median_run(command: list, runs: int = HISTORY_RUNS):
    """The run with the median wall time of ``runs`` runs of ``command`` (the first failed run if any fails)."""
    done = []
    for _ in range(runs):
        one = run_measured(command)
        if not one.ok:
            return one
        done.append(one)
    return sorted(done, key=lambda m: m.seconds)[len(done) // 2]


def _fit_said(stdout: str) -> tuple[float | None, str]:
    """(log-likelihood, the fit's lines about it) from ``caseview fit`` output."""
    wanted = ("log-likelihood", "iterations", "converged")
    lines = [line.strip() for line in stdout.splitlines() if line.strip().lower().startswith(wanted)]
    value = None
    for line in lines:
        match = re.search(r"log-likelihood[^-\d]*(-?[\d,]+\.?\d*)", line)
        if match:
            value = float(match.group(1).replace(",", ""))
            break
    return value, " | ".join(lines)


def caseload_commands(ctx, n: int, ws: Path, as_of: str, memory_mb: float, imported=None,
                      fit: bool = True, window: bool = True) -> dict:
    """Score, flags, history, window open and a 1-start fit on one irregular workspace; the seconds measured."""
    cv, measured = ctx.cv, {}
    size = f"{n:,} cases"
    if imported is not None:
        measured["import"] = imported.seconds
        ctx.rows.append(Row(f"`caseview import`, {size}, irregular gaps", imported.seconds, None,
                            "<= 10 s" if n <= 100_000 else "(completes)", imported.peak_mb,
                            limit=10.0 if n <= 100_000 else None, memory_limit_mb=memory_mb))
    for name, command in (("score", ["score", str(ws), "--as-of", as_of, "--out", str(ctx.work / f"s{n}.csv")]),
                          ("flags", ["flags", str(ws), "--as-of", as_of, "--out", str(ctx.work / f"f{n}.csv")])):
        ctx.log(f"timing caseview {name} ({size})")
        done = run_measured(cv + command)
        if done.ok or done.returncode == 4:   # 4: some cases cannot be scored (named), the rest were
            measured[name] = done.seconds
            ctx.rows.append(Row(f"`caseview {name}`, {size}, irregular gaps", done.seconds, None, "(completes)",
                                done.peak_mb, memory_limit_mb=memory_mb))
        else:
            ctx.missing.append(f"caseview {name} ({size}) failed: {done.problem()}")
    case_id = ctx.middle_case(ws)
    ctx.log(f"timing caseview history ({size}, median of {HISTORY_RUNS})")
    done = median_run(cv + ["history", str(ws), case_id, "--out", str(ctx.work / f"h{n}.csv")])
    if done.ok:
        measured["history"] = done.seconds
        ctx.rows.append(Row(f"`caseview history WS {case_id}`, {size} (reads that case only; median of "
                            f"{HISTORY_RUNS}; CPU {done.cpu_seconds:.2f} s)", done.seconds, None,
                            f"<= {HISTORY_LIMIT_S} s", done.peak_mb, limit=HISTORY_LIMIT_S, memory_limit_mb=memory_mb))
    else:
        ctx.missing.append(f"caseview history ({size}) failed: {done.problem()}")
    if window:
        ctx.log(f"timing the window's open ({size})")
        gui = run_measured([ctx.python, str(ctx.here / "gui_timing.py"), str(ws), "--as-of", as_of])
        figures = gui.last_json_line()
        if gui.ok and figures:
            measured["open"], measured["gui_figures"], measured["gui_peak_mb"] = figures["window_open"], figures, gui.peak_mb
            ctx.rows.append(Row(f"window: open {size} until the table shows data", figures["window_open"], None,
                                "<= 3 s" if n <= 100_000 else "(completes)", gui.peak_mb,
                                limit=3.0 if n <= 100_000 else None, memory_limit_mb=memory_mb))
        else:
            ctx.missing.append(f"window open ({size}) failed: {gui.problem() or 'no figures printed'}")
    if fit:
        ctx.log(f"timing caseview fit --starts 1 ({size})")
        done = run_measured(cv + ["fit", str(ws), "--starts", "1", "--keep-current"])
        if done.ok:
            log_likelihood, said = _fit_said(done.stdout)
            target = f"<= {FIT_LIMIT_S:.0f} s" if n == 100_000 else "(completes)"
            ctx.rows.append(Row(f"`caseview fit --starts 1`, {size}, irregular gaps (log-likelihood "
                                f"{log_likelihood if log_likelihood is not None else '?'})", done.seconds, None,
                                target, done.peak_mb, limit=FIT_LIMIT_S if n == 100_000 else None,
                                memory_limit_mb=memory_mb))
            ctx.notes.append(f"fit {size}: {said}")
            measured["fit"], measured["fit_log_likelihood"] = done.seconds, log_likelihood
        else:
            ctx.missing.append(f"caseview fit --starts 1 ({size}) failed: {done.problem()}")
    return measured


def growth_rows(ctx, small: int, large: int, small_seconds: dict, large_seconds: dict) -> None:
    """Time at the larger size over time at the smaller one; linear growth is ``large / small``."""
    linear = large / small
    for name, what in (("score", "`caseview score`"), ("open", "window open")):
        if name in small_seconds and name in large_seconds:
            ratio = large_seconds[name] / small_seconds[name]
            ctx.rows.append(Row(f"{what}: time at {large:,} / time at {small:,} cases", None, None,
                                f"<= {linear:g} (linear)", None, figure=f"x {ratio:.2f}", verdict=ratio <= linear))
        else:
            ctx.rows.append(Row(f"{what}: time at {large:,} / time at {small:,} cases", None, None,
                                f"<= {linear:g} (linear)", None, figure="-"))
