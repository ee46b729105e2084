"""PostgreSQL backend against SQLite: importing 1.2 million contacts, opening 100,000 cases in the window.

Targets (issue 16, "Performance"): the import within 2x of SQLite; opening the workspace in the
window until the table shows data within 1.5x of SQLite. The benchmark starts its own throwaway
PostgreSQL cluster (tests/postgres_cluster.py, durable settings: fsync and synchronous commit on,
like a SQLite workspace with ``synchronous=FULL``), on a unix socket, and stops it at the end.

Each measurement runs in a fresh process: ``caseview import`` (wall time of the whole command) and
``benchmarks/gui_timing.py`` (``window_open`` = open the workspace + load, score and flag + build and
paint the table, as the window does). The best of ``--repeats`` runs is compared.

Run::

    nice -n 10 python benchmarks/postgres_backend.py [--csv /tmp/records_bench/irregular.csv]

Measured 2026-12-03 (2 shared cores, load average 9-17, so single runs vary by up to 2x; PostgreSQL 15,
psycopg 3.3), 100,000 cases / 1,219,080 contacts, best of 2: import SQLite 32.3 s, PostgreSQL 37.8 s
(1.17x, target 2x, PASS); window open until the table shows SQLite 9.99 s, PostgreSQL 11.33 s (1.13x,
target 1.5x, PASS). An earlier single run: import 29.8 / 38.0 s (1.27x), open 10.1 / 8.4 s (0.83x).
Before the bulk path, the import took 188 s on PostgreSQL (row-by-row executemany), then 60 s with COPY
but per-row foreign-key checks (30 s of it), now about 38 s.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT))

MODEL = ROOT / "demo_cases" / "home_support_model.json"
IMPORT_TARGET = 2.0
OPEN_TARGET = 1.5


def _env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.setdefault("QT_QPA_PLATFORM", "offscreen")
    return env


def _run(args: list, what: str) -> tuple[float, str]:
    start = time.perf_counter()
    result = subprocess.run([sys.executable, *map(str, args)], capture_output=True, text=True, env=_env(), cwd=ROOT)
    seconds = time.perf_counter() - start
    if result.returncode != 0:
        raise SystemExit(f"{what} failed ({result.returncode}): {result.stderr.strip()[-2000:]}")
    return seconds, result.stdout


def import_seconds(target: str, csv_path: Path) -> float:
    _run(["-m", "caseview", "init", target, "--model", MODEL, "--by", "benchmark"], f"init {target}")
    seconds, out = _run(["-m", "caseview", "import", target, csv_path, "--by", "benchmark"], f"import into {target}")
    if "contacts added" not in out:
        raise SystemExit(f"import into {target} printed no counts: {out}")
    return seconds


def window_open_seconds(target: str, as_of: str) -> float:
    _, out = _run([HERE / "gui_timing.py", target, "--as-of", as_of], f"window timing of {target}")
    return float(json.loads(out.strip().splitlines()[-1])["window_open"])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--csv", type=Path, default=Path("/tmp/records_bench/irregular.csv"),
                        help="timeline CSV to import (default: the 100,000-case irregular caseload; generated "
                             "with benchmarks/generate.py when missing)")
    parser.add_argument("--as-of", default="2028-03-31")
    parser.add_argument("--repeats", type=int, default=2)
    args = parser.parse_args(argv)
    from postgres_cluster import PostgresCluster

    work = Path(tempfile.mkdtemp(prefix="cvpgbench-"))
    csv_path = args.csv
    if not csv_path.exists():
        csv_path = work / "irregular.csv"
        _run([HERE / "generate.py", "--cases", "100000", "--layout", "irregular", "--out", csv_path], "generate")
    rows = sum(1 for _ in open(csv_path, encoding="utf-8")) - 1
    figures = {"sqlite": {"import": [], "open": []}, "postgresql": {"import": [], "open": []}}
    with PostgresCluster(durable=True) as cluster:
        print(f"PostgreSQL server: {cluster.bindir} (socket {cluster.socket_dir}); {rows:,} contacts in {csv_path}")
        targets = {}
        for repeat in range(args.repeats):
            for kind in ("sqlite", "postgresql"):
                target = str(work / f"bench{repeat}.cvw") if kind == "sqlite" else cluster.create_database(f"bench{repeat}")
                seconds = import_seconds(target, csv_path)
                figures[kind]["import"].append(seconds)
                targets[kind] = target
                print(f"  import {kind:10s} run {repeat + 1}: {seconds:7.2f} s", flush=True)
        for repeat in range(args.repeats):
            for kind in ("sqlite", "postgresql"):
                seconds = window_open_seconds(targets[kind], args.as_of)
                figures[kind]["open"].append(seconds)
                print(f"  window open {kind:10s} run {repeat + 1}: {seconds:7.2f} s", flush=True)
    ok = True
    print()
    print(f"{'measure':44s} {'SQLite':>9s} {'PostgreSQL':>11s} {'ratio':>7s} {'target':>7s}  result")
    for key, label, target in (("import", f"import {rows:,} contacts (best of {args.repeats})", IMPORT_TARGET),
                               ("open", f"window: open until the table shows (best of {args.repeats})", OPEN_TARGET)):
        sqlite, postgres = min(figures["sqlite"][key]), min(figures["postgresql"][key])
        ratio = postgres / sqlite
        passed = ratio <= target
        ok &= passed
        print(f"{label:44s} {sqlite:8.2f}s {postgres:10.2f}s {ratio:7.2f} {target:6.1f}x  {'PASS' if passed else 'FAIL'}")
    import shutil

    shutil.rmtree(work, ignore_errors=True)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
