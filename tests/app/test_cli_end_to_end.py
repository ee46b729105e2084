"""The CLI contract of the walking skeleton, driven from subprocesses as outside checks would."""

from __future__ import annotations

import csv
import subprocess
import sys

import numpy as np
import pytest

from caseview.modelfile import load_model
from tests.conftest import ROOT

DEMO_MODEL_FILE = ROOT / "demo_cases" / "home_support_model.json"


def run(*args, ok=True):
    proc = subprocess.run([sys.executable, "-m", "caseview", *map(str, args)], capture_output=True, text=True,
                          timeout=300)
    if ok:
        assert proc.returncode == 0, proc.stderr
    return proc


def read_csv(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


@pytest.fixture(scope="module")
def demo_ws(tmp_path_factory):
    path = tmp_path_factory.mktemp("demo") / "demo workspace"  # no extension, a space in the name
    run("demo", path)
    return path


def test_score_contract(demo_ws, tmp_path):
    out = tmp_path / "scores.csv"
    run("score", demo_ws, "--as-of", "2025-06-30", "--horizon", "60", "--out", out)
    rows = read_csv(out)
    model = load_model(DEMO_MODEL_FILE)
    expected = (["case_id", "as_of", "last_contact", "days_since_contact"] + [f"p_{s}" for s in model.stages]
                + ["most_likely_stage", "horizon_days"] + [f"p_reach_{s}" for s in model.stages] + ["flags"])
    assert list(rows[0])[:len(expected)] == expected
    # Only cases whose first contact is on or before the as-of date, and only contacts up to it.
    timelines = read_csv(ROOT / "demo_cases" / "home_support_demo.csv")
    first, last = {}, {}
    for r in timelines:
        if r["date"] <= "2025-06-30":
            first[r["case_id"]] = min(first.get(r["case_id"], r["date"]), r["date"])
            last[r["case_id"]] = max(last.get(r["case_id"], r["date"]), r["date"])
    assert {r["case_id"] for r in rows} == set(first)
    for r in rows:
        assert r["last_contact"] == last[r["case_id"]]
        p = np.array([float(r[f"p_{s}"]) for s in model.stages])
        assert abs(p.sum() - 1) < 1e-5
        assert r["most_likely_stage"] == model.stages[int(np.argmax(p))]
        assert r["horizon_days"] == "60"
        reach = np.array([float(r[f"p_reach_{s}"]) for s in model.stages])
        assert np.all(reach >= p - 1e-6)


def test_history_contract(demo_ws, tmp_path):
    out = tmp_path / "history.csv"
    run("history", demo_ws, "HS-0007", "--out", out)
    rows = read_csv(out)
    source = [r for r in read_csv(ROOT / "demo_cases" / "home_support_demo.csv") if r["case_id"] == "HS-0007"]
    assert [r["date"] for r in rows] == sorted(r["date"] for r in source)
    model = load_model(DEMO_MODEL_FILE)
    for r in rows:
        assert r["path_stage"] in model.stages
        assert abs(sum(float(r[f"p_{s}"]) for s in model.stages) - 1) < 1e-5
        src = next(s for s in source if s["date"] == r["date"])
        assert all(r[c.name] == src[c.name] for c in model.channels)
    cut = tmp_path / "cut.csv"
    run("history", demo_ws, "HS-0007", "--as-of", rows[2]["date"], "--out", cut)
    assert len(read_csv(cut)) == 3


def test_export_round_trip(demo_ws, tmp_path):
    exported = tmp_path / "timelines.csv"
    run("export", demo_ws, "--out", exported)
    fresh = tmp_path / "fresh.cvw"
    run("init", fresh, "--model", DEMO_MODEL_FILE)
    run("import", fresh, exported)
    again = tmp_path / "again.csv"
    run("export", fresh, "--out", again)
    assert read_csv(exported) == read_csv(again)
    key = lambda r: (r["case_id"], r["date"])  # noqa: E731
    original = sorted(read_csv(ROOT / "demo_cases" / "home_support_demo.csv"), key=key)
    back = sorted(read_csv(exported), key=key)
    assert len(original) == len(back)
    for a, b in zip(original, back):
        for column in ("case_id", "date", "coordinator", "mobility", "falls", "concern", "stage_known"):
            assert a[column] == b[column], (column, a, b)
        assert float(a["lives_alone"]) == float(b["lives_alone"])


@pytest.mark.parametrize("args, fragment", [
    (("score", "/nonexistent/ws", "--as-of", "2026-01-01", "--out", "x.csv"), "/nonexistent/ws"),
    (("score", "{ws}", "--as-of", "2026-13-01", "--out", "x.csv"), "--as-of: expected a date as YYYY-MM-DD"),
    (("history", "{ws}", "HS-9999", "--out", "x.csv"), "HS-9999"),
    (("score", "{ws}", "--as-of", "2026-01-01"), "--out"),
])
def test_errors_are_one_line_without_traceback(demo_ws, tmp_path, args, fragment):
    args = [a.format(ws=demo_ws) for a in args]
    proc = subprocess.run([sys.executable, "-m", "caseview", *args], capture_output=True, text=True,
                          cwd=tmp_path, timeout=120)
    assert proc.returncode != 0
    assert "Traceback" not in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and fragment in lines[0], proc.stderr
