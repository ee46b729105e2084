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

Run::

    python benchmarks/outlook.py [--cases 100000] [--draws 200] [--work /tmp/caseview_outlook_bench]
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
    _run(CASEVIEW + ["fit", str(small)])
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
    return 0 if all(r.passed() for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
