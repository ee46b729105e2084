"""Time a 1-start fit of a large workspace and say where the time goes (issue 19 item 2).

Two measurements on the same workspace (the issue's case: the 100,000-case irregular workspace):

1. the whole command ``caseview fit WS --starts 1 --keep-current`` in a fresh process
   (``benchmarks/measure.py``: wall time, CPU time of all threads, peak memory), run on a copy so
   the workspace keeps its current model;
2. the same fit in this process (``caseview.operations.fitting.compute_fit``), with wall and CPU
   time of each part: reading the contacts, the likelihood plan, the optimiser's evaluations, the
   observed information's evaluations, and inside every evaluation the step matrices, the forward
   and backward passes, the per-pair sums and the gradient assembly. Threads' CPU time is
   measured per thread (``time.thread_time``) and added up, so CPU can exceed wall.

The target: at most 30 s wall for the whole command with 1 start, the same optimum (the
log-likelihood within 0.01 of the earlier code's: pass ``--expect`` to check).

Measured 2026-12-03 on the shared 2-core machine (load average 11-14, so wall time is 2-3x CPU time), the
100,000-case irregular workspace (1,219,080 contacts), 1 start: before, 274 s wall, 123.9 s CPU (with a one-off
schema migration), 904 MB, 127 likelihood evaluations (41 optimiser + 86 for the information), about 0.84 s CPU
each, plan 10.4 s; after, 52.7-96.9 s wall, 24.5-29.5 s CPU, 476-556 MB, 84 evaluations (41 + 43), about 0.25 s
CPU each, plan 0.4 s; log-likelihood -2640688.34886109 both (difference 3e-9). At load average 2-3 (14:00,
main merged) the whole command took 20.7 s and 22.3 s wall (34.4 / 35.3 s CPU over both threads), 470 MB.

Run::

    python benchmarks/fit_speed.py /tmp/records_bench/ws100k.cvw [--threads N] [--expect -2639412.63]
    python benchmarks/fit_speed.py WS --skip-command       # only the in-process breakdown
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import threading
import time
from collections import defaultdict
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from measure import run_measured  # noqa: E402

TARGET_SECONDS = 30.0


class Timings:
    """Wall and CPU seconds per labelled part, summed over calls and threads."""

    def __init__(self):
        self.wall = defaultdict(float)
        self.cpu = defaultdict(float)
        self.calls = defaultdict(int)
        self._lock = threading.Lock()

    def wrap(self, owner, name: str, label: str) -> None:
        original = getattr(owner, name)

        def timed(*args, **kwargs):
            start, start_cpu = time.perf_counter(), time.thread_time()
            try:
                return original(*args, **kwargs)
            finally:
                with self._lock:
                    self.wall[label] += time.perf_counter() - start
                    self.cpu[label] += time.thread_time() - start_cpu
                    self.calls[label] += 1

        setattr(owner, name, timed)


def in_process(workspace: Path, threads: int | None) -> dict:
    """Fit in this process with timers around the parts; returns the figures."""
    import numpy as np

    from caseview.operations.fitting import FitOptions, compute_fit, fit_inputs
    from caseview.storage.workspace import Workspace
    from hmm.fitting import likelihood, likelihood_plan, optimise

    timings = Timings()
    # per evaluation (inside the block threads: thread CPU time)
    timings.wrap(likelihood, "scaled_forward", "evaluation: forward pass")
    timings.wrap(likelihood, "scaled_backward", "evaluation: backward pass")
    timings.wrap(likelihood, "_pair_sums", "evaluation: per-pair and per-pattern sums")
    timings.wrap(likelihood, "_step_matrices", "evaluation: step matrices (eigen, expm)")
    timings.wrap(likelihood, "_transition_gradient", "evaluation: adjoint derivative and chain rule")
    timings.wrap(likelihood, "_run_blocks", "evaluation: case blocks (all threads, wall)")
    timings.wrap(optimise, "evaluate", "likelihood evaluations (all)")
    timings.wrap(optimise, "prepare", "likelihood plan (prepare)")
    timings.wrap(optimise, "observed_information", "observed information (finite differences)")
    if threads is not None:
        original_prepare = likelihood_plan.prepare

        def prepare_with_threads(model, timelines, spec=None):
            return original_prepare(model, timelines, spec, threads=threads)

        optimise.prepare = prepare_with_threads

    start, start_cpu = time.perf_counter(), time.process_time()
    with Workspace.open(workspace) as ws:
        inputs = fit_inputs(ws)
    read_wall, read_cpu = time.perf_counter() - start, time.process_time() - start_cpu
    start, start_cpu = time.perf_counter(), time.process_time()
    outcome = compute_fit(inputs, FitOptions(starts=1))
    fit_wall, fit_cpu = time.perf_counter() - start, time.process_time() - start_cpu
    result = outcome.result
    return {
        "cases": inputs.timelines.n_cases, "contacts": inputs.timelines.n_contacts,
        "read_seconds": read_wall, "read_cpu_seconds": read_cpu,
        "fit_seconds": fit_wall, "fit_cpu_seconds": fit_cpu,
        "log_likelihood": float(result.log_likelihood), "iterations": int(result.iterations),
        "evaluations": int(result.n_likelihood_evaluations), "converged": bool(result.converged),
        "threads": threads if threads is not None else likelihood_plan.default_threads(inputs.timelines.n_contacts),
        "parts": {label: {"seconds": timings.wall[label], "cpu_seconds": timings.cpu[label],
                          "calls": timings.calls[label]} for label in timings.wall},
        "free_parameters": int(np.size(result.free_vector)),
    }


def whole_command(workspace: Path, work: Path) -> dict:
    copy = work / "fit_speed.cvw"
    shutil.copyfile(workspace, copy)
    for suffix in ("-wal", "-shm"):
        Path(str(copy) + suffix).unlink(missing_ok=True)
    measured = run_measured([sys.executable, "-m", "caseview", "fit", str(copy), "--starts", "1",
                             "--keep-current"], cwd=str(ROOT))
    lines = [line for line in measured.stdout.splitlines() if line.strip().startswith(("log-likelihood",
                                                                                      "iterations"))]
    return {"seconds": measured.seconds, "cpu_seconds": measured.cpu_seconds, "peak_mb": measured.peak_mb,
            "returncode": measured.returncode, "summary": lines, "stderr_tail": measured.stderr[-400:]}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("workspace", type=Path)
    parser.add_argument("--threads", type=int, default=None, help="case blocks in parallel (default: one per core)")
    parser.add_argument("--expect", type=float, default=None,
                        help="log-likelihood of the earlier code's optimum: check |difference| <= 0.01")
    parser.add_argument("--skip-command", action="store_true", help="only the in-process breakdown")
    parser.add_argument("--work", type=Path, default=None, help="folder for the workspace copy (default: a temp dir)")
    args = parser.parse_args(argv)
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    work = args.work or Path(tempfile.mkdtemp(prefix="caseview_fit_speed_"))
    work.mkdir(parents=True, exist_ok=True)
    # migrate once (opening a workspace of an older schema migrates it) so neither measurement pays for it
    copy = work / "migrated.cvw"
    shutil.copyfile(args.workspace, copy)
    from caseview.storage.workspace import Workspace

    with Workspace.open(copy):
        pass
    report = {}
    if not args.skip_command:
        report["command"] = whole_command(copy, work)
        c = report["command"]
        print(f"whole command: {c['seconds']:.1f} s wall, {c['cpu_seconds']:.1f} s CPU, peak {c['peak_mb']:.0f} MB "
              f"(target <= {TARGET_SECONDS:.0f} s: {'PASS' if c['seconds'] <= TARGET_SECONDS else 'FAIL'})")
        for line in c["summary"]:
            print("  " + line.strip())
    figures = in_process(copy, args.threads)
    report["in_process"] = figures
    print(f"in process: {figures['cases']:,} cases, {figures['contacts']:,} contacts, {figures['threads']} threads")
    print(f"  reading the contacts      {figures['read_seconds']:7.2f} s wall {figures['read_cpu_seconds']:7.2f} s CPU")
    print(f"  fit (1 start)             {figures['fit_seconds']:7.2f} s wall {figures['fit_cpu_seconds']:7.2f} s CPU")
    print(f"  log-likelihood {figures['log_likelihood']:.4f}, {figures['iterations']} iterations, "
          f"{figures['evaluations']} likelihood evaluations, converged {figures['converged']}")
    print("  where the time goes (wall / CPU of all threads / calls):")
    for label, part in sorted(figures["parts"].items(), key=lambda item: -item[1]["seconds"]):
        print(f"    {label:55s} {part['seconds']:7.2f} s {part['cpu_seconds']:7.2f} s {part['calls']:5d}")
    if args.expect is not None:
        difference = figures["log_likelihood"] - args.expect
        print(f"  optimum vs expected: difference {difference:+.4f} "
              f"({'PASS' if abs(difference) <= 0.01 else 'FAIL'}: within 0.01)")
    print(json.dumps(report))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
