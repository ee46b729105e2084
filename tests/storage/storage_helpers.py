"""Helpers for the storage tests: small invented timelines (HS-0001 style IDs, coordinators C1..C4)."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
DEMO_MODEL_PATH = ROOT / "resources" / "models" / "home_support_demo.json"

HEADER = ["case_id", "date", "coordinator", "mobility", "falls", "concern", "lives_alone", "balance_programme",
          "stage_known"]

ROWS = [
    ["HS-0002", "2025-01-10", "C1", "normal", "none", "none", "1", "0", ""],
    ["HS-0001", "2025-01-05", "C2", "slow", "one", "some", "0", "0", ""],
    ["HS-0001", "2025-03-05", "C2", "", "none", "serious", "0", "1", "Struggling|Crisis"],
    ["HS-0002", "2025-02-10", "C3", "unable", "", "", "1", "0", ""],
    ["HS-0003", "2024-11-30", "", "normal", "several", "some", "1", "1", "Stable"],
]


def write_csv(path: Path, rows, header=HEADER, encoding="utf-8", bom=False) -> Path:
    with open(path, "w", encoding=("utf-8-sig" if bom else encoding), newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        writer.writerows(rows)
    return path


def generated_rows(n_cases: int, per_case: int, rng) -> list:
    cats = {"mobility": ["normal", "slow", "unable", ""], "falls": ["none", "one", "several", ""],
            "concern": ["none", "some", "serious", ""]}
    rows = []
    for c in range(n_cases):
        day0 = 19725 + int(rng.integers(0, 300))  # 2024-01-02 + up to ~10 months
        days = day0 + (rng.integers(14, 112, per_case)).cumsum()
        lives_alone = str(int(rng.integers(0, 2)))
        for d in days:
            date = str(np.datetime64(int(d), "D"))
            rows.append([f"HS-{c + 1:04d}", date, f"C{1 + c % 4}",
                         *(cats[k][int(rng.integers(0, 4))] for k in ("mobility", "falls", "concern")),
                         lives_alone, str(int(rng.integers(0, 2))), ""])
    return rows




def as_caseview_before_case_packs(patch) -> None:
    """Make the writers behave like a caseview from before ``case_packs`` existed (for tests that build an
    older workspace with fewer migrations): no packed contacts are written."""
    from caseview.storage import case_packs

    for name in ("write_case_packs", "refresh_case_packs", "rebuild_case_packs"):
        patch.setattr(case_packs, name, lambda *args, **kwargs: None)
