"""Time ``caseview outlook`` at 100,000 cases, without and with parameter uncertainty (issue 18).

Targets: under 5 s without parameter uncertainty, under 30 s with it (200 draws). Each figure is
one ``caseview outlook`` command in a fresh process (start-up and scoring included), measured by
``benchmarks/measure.py``.

Set-up (not timed, reused from ``--work`` when present): ``generate.py`` makes the invented
100,000-case caseload (irregular layout) and ``caseview init`` + ``import`` store it. Parameter
draws need a fitted model with a stored covariance; fitting 100,000 cases is a study of its own,
so the model is fitted (``caseview fit``) to a 3,000-case caseload simulated from the same demo
model, and that fitted version is added to the big workspace as its current model. Its covariance
is wider than a 100,000-case fit's would be, which does not change the work done.

With parameter uncertainty every draw also moves each case's stage probabilities now
(:mod:`caseview.followup.now_draws`: a stratified sample of 5,000 open cases rescored under each
draw, the other cases moved by their group's average change). ``--stability`` then compares, in
this process and with the same parameter draws, the bands from that sample with those from a
larger sample and from every case rescored (``--stability-draws`` draws, default 40; every case
costs one full rescore per draw).

Run::

    python benchmarks/outlook.py [--cases 100000] [--draws 200] [--work /tmp/caseview_outlook_bench] [--stability]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from measure import run_measured  # noqa: E402
from report import Row, render_table  # noqa: E402

PYTHON = sys.executable
CASEVIEW = [PYTHON, "-m", "caseview"]


def _run(command: list) -> str:
    done = subprocess.run(command, capture_output=True, text=True, cwd=ROOT)
    if done.returncode not in (0, 1):
        raise SystemExit(f"failed: {' '.join(command)}\n{done.stderr}")
    return done.stdout


def _caseload(work: Path, cases: int, seed: int) -> tuple:
    """Generate and import a caseload (reused when present); returns (workspace, last contact day)."""
    csv, ws, info = work / f"cases_{cases}.csv", work / f"cases_{cases}.cvw", work / f"cases_{cases}.json"
    if not (ws.exists() and info.exists()):
        ws.unlink(missing_ok=True)
        out = _run([PYTHON, str(HERE / "generate.py"), "--cases", str(cases), "--layout", "irregular", "--out",
                    str(csv), "--seed", str(seed), "--model-out", str(work / "demo_model.json")])
        summary = json.loads(out.strip().splitlines()[-1])
        _run(CASEVIEW + ["init", str(ws), "--model", str(work / "demo_model.json")])
        _run(CASEVIEW + ["import", str(ws), str(csv)])
        info.write_text(json.dumps(summary), encoding="utf-8")
    return ws, json.loads(info.read_text(encoding="utf-8"))["last_day"]


def _fitted_model_into(big: Path, small: Path) -> int:
    """Fit the small workspace and add its fitted version (with the fit summary) to the big one."""
    from caseview.storage import Workspace

    with Workspace.open(big) as ws:
        _, version = ws.current_model()
        if version.fit_summary and version.fit_summary.get("covariance"):
            return version.id
    _run(CASEVIEW + ["fit", str(small), "--calibration-draws", "0"])   # the outlook needs the covariance only
    with Workspace.open(small) as ws:
        _, fitted = ws.current_model()
    with Workspace.open(big) as ws:
        return ws.add_model_version(fitted.json_text, "fitted to 3,000 simulated cases (benchmark)", "benchmark",
                                    fit_summary=fitted.fit_summary, make_current=True)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=100_000)
    parser.add_argument("--draws", type=int, default=200)
    parser.add_argument("--seed", type=int, default=20261203)
    parser.add_argument("--work", type=Path, default=Path("/tmp/caseview_outlook_bench"))
    parser.add_argument("--stability", action="store_true", help="compare the now-sample with every case")
    parser.add_argument("--stability-draws", type=int, default=40)
    args = parser.parse_args(argv)
    args.work.mkdir(parents=True, exist_ok=True)
    big, last_day = _caseload(args.work, args.cases, args.seed)
    small, _ = _caseload(args.work, 3000, args.seed + 1)
    version = _fitted_model_into(big, small)
    rows, notes = [], [f"current model: version {version} (fitted to 3,000 simulated cases)"]
    for label, options, limit in (("without parameter uncertainty", ["--uncertainty", "none"], 5.0),
                                  (f"with parameter uncertainty ({args.draws} draws)",
                                   ["--uncertainty", "parameters", "--draws", str(args.draws)], 30.0)):
        out = args.work / "outlook.csv"
        measured = run_measured(CASEVIEW + ["outlook", str(big), "--as-of", last_day, "--months", "12",
                                            "--referrals", "auto", "--out", str(out)] + options)
        if not measured.ok:
            raise SystemExit(f"outlook failed: {measured.stderr}")
        rows.append(Row(f"`caseview outlook`, {args.cases:,} cases, 12 months, {label}", measured.seconds, None,
                        f"<= {limit:g} s", measured.peak_mb, limit=limit, cpu_seconds=measured.cpu_seconds))
        notes.append(f"{label}: " + " / ".join(measured.stdout.strip().splitlines()[:3]))
        print(f"outlook {args.cases} cases {label}: {measured.seconds:.2f} s (CPU {measured.cpu_seconds:.2f} s, "
              f"peak {measured.peak_mb:.0f} MB; target {limit:g} s)", flush=True)
    print()
    print(render_table(rows))
    for note in notes:
        print(f"- {note}")
    if args.stability:
        _stability(big, last_day, args.stability_draws, args.seed)
    return 0 if all(r.passed() for r in rows) else 1


def _stability(path: Path, last_day: str, draws: int, seed: int) -> None:
    """Bands with the default now-sample against a larger one and every case (same draws, same seed)."""
    import datetime as dt
    import time

    import numpy as np

    from caseview.followup.now_draws import NOW_SAMPLE_CASES
    from caseview.operations.outlook import outlook_from_scores
    from caseview.scoring import score_caseload
    from caseview.storage import Workspace

    as_of = dt.date.fromisoformat(last_day)
    with Workspace.open(path) as ws:
        model, version = ws.current_model()
        scores = score_caseload(ws, as_of, 0.0, model=model)
    results = {}
    for size in (NOW_SAMPLE_CASES, 4 * NOW_SAMPLE_CASES, 0):
        started = time.perf_counter()
        results[size] = outlook_from_scores(scores, version, as_of, 12, "auto", "parameters", draws, seed,
                                            now_sample=size)
        print(f"stability: now rescored for {results[size].now_rescored:,} cases x {draws} draws: "
              f"{time.perf_counter() - started:.1f} s", flush=True)
    reference = results[0]
    width = reference.upper_95 - reference.lower_95
    for size in (NOW_SAMPLE_CASES, 4 * NOW_SAMPLE_CASES):
        gaps = np.maximum(np.abs(results[size].lower_95 - reference.lower_95),
                          np.abs(results[size].upper_95 - reference.upper_95))
        print(f"stability: sample {size:,} against every case: largest difference of a band end "
              f"{gaps.max():.0f} cases ({(gaps / np.maximum(width, 1)).max():.1%} of that band's width; "
              f"median {np.median(gaps / np.maximum(width, 1)):.1%}); widest band {width.max():.0f}")
    plain = outlook_from_scores(scores, version, as_of, 12, "auto", "none")
    ratio = (reference.upper_95 - reference.lower_95).sum() / max((plain.upper_95 - plain.lower_95).sum(), 1)
    print(f"stability: bands with parameter uncertainty (now included) are {ratio:.2f} x as wide in total as "
          "without", flush=True)


if __name__ == "__main__":
    sys.exit(main())
