"""A model without covariates scores a caseload (the two-channel comparison of issue 19 found it refused)."""

from __future__ import annotations

import csv
import json
from pathlib import Path

from caseview.cli.main import main

ROOT = Path(__file__).resolve().parents[2]


def _model_without_covariates() -> str:
    data = json.loads((ROOT / "resources" / "models" / "home_support_demo.json").read_text(encoding="utf-8"))
    data["covariates"] = []
    for transition in data["transitions"]:
        transition.pop("effects", None)
    data["channels"] = data["channels"][:2]
    return json.dumps(data)


def test_score_and_history_with_a_model_without_covariates(tmp_path, capsys):
    model = tmp_path / "model.json"
    model.write_text(_model_without_covariates(), encoding="utf-8")
    timelines = tmp_path / "t.csv"
    with open(timelines, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(["case_id", "date", "coordinator", "mobility", "falls"])
        writer.writerows([["HS-0001", "2025-01-05", "C1", "normal", "none"],
                          ["HS-0001", "2025-02-04", "C1", "slow", "one"],
                          ["HS-0002", "2025-01-10", "C2", "unable", ""]])
    ws = str(tmp_path / "w.cvw")
    assert main(["init", ws, "--model", str(model)]) == 0
    assert main(["import", ws, str(timelines)]) == 0
    assert main(["score", ws, "--as-of", "2025-03-01", "--out", str(tmp_path / "s.csv")]) == 0
    rows = list(csv.DictReader(open(tmp_path / "s.csv", encoding="utf-8")))
    assert [r["case_id"] for r in rows] == ["HS-0001", "HS-0002"]
    assert abs(sum(float(rows[0][f"p_{s}"]) for s in ("Stable", "Slipping", "Struggling", "Crisis",
                                                       "Moved to residential care")) - 1.0) < 1e-5
    assert main(["history", ws, "HS-0001", "--out", str(tmp_path / "h.csv")]) == 0
