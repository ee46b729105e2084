"""Generate the invented demo caseload for the home-support scenario (fixed seed, reproducible).

Everything here is invented: no real people, organisations or records. The model's rates and
misclassification probabilities (resources/models/home_support_demo.json) are invented too.

The scenario (../shared/SCENARIO.md): a home-support service for older adults; coordinators C1-C4
contact each client every 2 to 16 weeks, sooner when worried; at each contact they record a banded
mobility check, falls since the last contact and their own concern; the stage of independence is
never recorded. Some clients enrol in a strength-and-balance programme (recorded at a contact, it
holds from then on); a move to residential care is recorded with its exact date.

Run:  python demo_cases/generate_demo.py          (writes home_support_demo.csv and the model copy)
      python demo_cases/generate_demo.py --cases 100000 --out big.csv   (a large caseload for benchmarks)
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import shutil
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from caseview.modelfile import load_model  # noqa: E402
from hmm.simulate import simulate_path  # noqa: E402

TEMPLATE = ROOT / "resources" / "models" / "home_support_demo.json"
SEED = 20240101
START = dt.date(2024, 1, 8)
END = dt.date(2026, 11, 27)
COORDINATORS = ("C1", "C2", "C3", "C4")


def next_gap(concern: str, falls: str, rng: np.random.Generator) -> int:
    """Days to the next contact: 2-16 weeks, sooner when the coordinator is worried (invented policy)."""
    if concern == "serious" or falls == "several":
        weeks = rng.integers(2, 5)
    elif concern == "some" or falls == "one":
        weeks = rng.integers(4, 10)
    else:
        weeks = rng.integers(8, 17)
    return int(weeks * 7 + rng.integers(-3, 4))


def simulate_case(model, index: int, rng: np.random.Generator, start: dt.date, end: dt.date) -> list:
    """Rows (dicts in the import layout) for one invented case."""
    stages = model.stages
    exit_stage = model.stage_index("Moved to residential care")
    lives_alone = int(rng.random() < 0.45)
    programme = 0
    enrol_after = rng.integers(2, 8) if rng.random() < 0.35 else None
    coordinator = COORDINATORS[int(rng.integers(len(COORDINATORS)))]
    span = (end - start).days
    first = start + dt.timedelta(days=int(rng.integers(0, max(1, span - 60))))
    stage = int(rng.choice(model.n_stages, p=model.initial))
    day = first
    rows = []
    contact_number = 0
    while day <= end:
        by_phone = rng.random() < 0.3
        values = {}
        for channel in model.channels:
            if channel.name == "mobility" and by_phone:
                values[channel.name] = ""  # a timed walk cannot be done over the phone
            elif rng.random() < 0.06:
                values[channel.name] = ""  # not recorded
            else:
                k = int(rng.choice(channel.n_categories, p=channel.probabilities[stage]))
                values[channel.name] = channel.categories[k]
        if enrol_after is not None and contact_number >= enrol_after:
            programme = 1
        rows.append({"case_id": f"HS-{index:04d}" if index < 10000 else f"HS-{index:06d}",
                     "date": day.isoformat(), "coordinator": coordinator, **values,
                     "lives_alone": lives_alone, "balance_programme": programme, "stage_known": ""})
        contact_number += 1
        gap = next_gap(values.get("concern", ""), values.get("falls", ""), rng)
        q = model.generator([lives_alone, programme])
        times, path = simulate_path(q, stage, gap, rng)
        if exit_stage in path:
            entered = float(times[int(np.flatnonzero(path == exit_stage)[0])])
            exit_day = day + dt.timedelta(days=max(1, int(np.ceil(entered))))
            if exit_day <= end:
                row = {k: "" for k in rows[-1]}
                row.update(case_id=rows[-1]["case_id"], date=exit_day.isoformat(), coordinator=coordinator,
                           lives_alone=lives_alone, balance_programme=programme,
                           stage_known="Moved to residential care")
                rows.append(row)
            break
        stage = int(path[-1])
        day = day + dt.timedelta(days=gap)
    return rows


def generate(n_cases: int, out: Path, seed: int = SEED) -> int:
    model = load_model(TEMPLATE)
    rng = np.random.default_rng(seed)
    columns = ["case_id", "date", "coordinator"] + [c.name for c in model.channels] + list(model.covariates) + \
        ["stage_known"]
    n_rows = 0
    with open(out, "w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        for i in range(1, n_cases + 1):
            rows = simulate_case(model, i, rng, START, END)
            writer.writerows(rows)
            n_rows += len(rows)
    return n_rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=400)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--out", type=Path, default=HERE / "home_support_demo.csv")
    args = parser.parse_args(argv)
    n_rows = generate(args.cases, args.out, args.seed)
    if args.out == HERE / "home_support_demo.csv":
        shutil.copyfile(TEMPLATE, HERE / "home_support_model.json")
    print(f"wrote {args.cases} invented cases, {n_rows} contacts to {args.out} (seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
