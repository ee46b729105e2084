"""Generate the invented demo caseload for the home-support scenario (fixed seed, reproducible).

Everything here is invented: no real people, organisations or records. The model's rates and
misclassification probabilities (resources/models/home_support_demo.json) are invented too, and so
are the unscheduled contact rates below.

The scenario (../shared/SCENARIO.md): a home-support service for older adults; coordinators C1-C4
review each client on a schedule (every 8 to 16 weeks) and also see clients between reviews when
something happens (a fall, a worried call from family or a neighbour): those unscheduled contacts
come more often the worse a client is doing (invented rates per stage, :data:`UNSCHEDULED_PER_YEAR`).
Each contact is marked ``contact_kind`` scheduled or unscheduled. At each contact they record a
banded mobility check, falls since the last contact and their own concern; the stage of independence
is never recorded. Some clients enrol in a strength-and-balance programme (recorded at a review, it
holds from then on); a move to residential care is recorded with its exact date.

The hidden paths and the unscheduled contacts are drawn exactly by the engine's simulator
(``hmm.simulate.simulate_caseload``) from the demo model with the unscheduled-contact block; the
demo workspace's model (home_support_model.json) is that model, so scoring uses the timing of
contacts as evidence.

Run:  python demo_cases/generate_demo.py          (writes home_support_demo.csv and the model copy)
      python demo_cases/generate_demo.py --cases 100000 --out big.csv   (a large caseload for benchmarks)
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from caseview.modelfile import dump_model, load_model  # noqa: E402
from hmm.model import UnscheduledContacts  # noqa: E402
from hmm.simulate import simulate_caseload  # noqa: E402
from hmm.timelines import MISSING  # noqa: E402

TEMPLATE = ROOT / "resources" / "models" / "home_support_demo.json"
SEED = 20240101
START = dt.date(2024, 1, 8)
END = dt.date(2026, 11, 27)
COORDINATORS = ("C1", "C2", "C3", "C4")
#: Invented: unscheduled contacts per year in each stage (a fall, a worried call), none once in residential care.
UNSCHEDULED_PER_YEAR = {"Stable": 0.8, "Slipping": 2.0, "Struggling": 4.5, "Crisis": 10.0,
                        "Moved to residential care": 0.0}
#: Invented: log rate ratio of living alone on unscheduled contacts (neighbours and family call a little more).
UNSCHEDULED_EFFECTS = {"lives_alone": 0.25}


def demo_model():
    """The demo model with the invented unscheduled-contact block (what the demo workspace uses)."""
    from dataclasses import replace

    model = load_model(TEMPLATE)
    rates = np.array([UNSCHEDULED_PER_YEAR[s] / 365.25 for s in model.stages])
    return replace(model, unscheduled_contacts=UnscheduledContacts(rates, dict(UNSCHEDULED_EFFECTS)))


def review_schedule(rng: np.random.Generator, first: int, end: int) -> np.ndarray:
    """Review days from ``first`` until ``end``: every 8 to 16 weeks (an invented schedule)."""
    days = [first]
    while True:
        nxt = days[-1] + int(rng.integers(8, 17)) * 7 + int(rng.integers(-3, 4))
        if nxt > end:
            return np.array(days, dtype=float)
        days.append(nxt)


def generate(n_cases: int, out: Path, seed: int = SEED) -> int:
    model = demo_model()
    rng = np.random.default_rng(seed)
    start, end = (START - dt.date(1970, 1, 1)).days, (END - dt.date(1970, 1, 1)).days
    schedules, covariates, lives_alone, coordinators = [], [], [], []
    for _ in range(n_cases):
        first = start + int(rng.integers(0, max(1, end - start - 60)))
        days = review_schedule(rng, first, end)
        alone = int(rng.random() < 0.45)
        enrol_after = int(rng.integers(2, 8)) if rng.random() < 0.35 else None
        programme = np.array([1.0 if enrol_after is not None and k >= enrol_after else 0.0 for k in range(days.size)])
        schedules.append(days)
        covariates.append(np.column_stack([np.full(days.size, float(alone)), programme]))
        lives_alone.append(alone)
        coordinators.append(COORDINATORS[int(rng.integers(len(COORDINATORS)))])
    sim = simulate_caseload(model, schedules, covariates, rng, end_times=np.full(n_cases, float(end)))
    t = sim.timelines
    observations = t.observations.copy()
    by_phone = rng.random(t.n_contacts) < 0.3               # a timed walk cannot be done over the phone
    observations[by_phone, model.channels.index(next(c for c in model.channels if c.name == "mobility"))] = MISSING
    observations[rng.random(observations.shape) < 0.06] = MISSING   # not recorded
    columns = ["case_id", "date", "coordinator"] + [c.name for c in model.channels] + list(model.covariates) + \
        ["stage_known", "contact_kind"]
    n_rows = 0
    with open(out, "w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=columns, lineterminator="\n")
        writer.writeheader()
        for i in range(n_cases):
            rows = _case_rows(model, t, sim, observations, i, coordinators[i])
            writer.writerows(rows)
            n_rows += len(rows)
    return n_rows


def _case_rows(model, t, sim, observations, i: int, coordinator: str) -> list:
    """Rows (dicts in the import layout) for case ``i``: contact days are whole days; an unscheduled contact on
    the day of another contact is left out (one row per case and day); the move to residential care is
    recorded on the day after it happened."""
    case_id = f"HS-{i + 1:04d}" if i + 1 < 10000 else f"HS-{i + 1:06d}"
    rows, used = [], set()
    for j in range(t.offsets[i], t.offsets[i + 1]):
        exit_record = bool(sim.exact_entry_contact[j])
        day = int(np.ceil(t.times[j])) if exit_record else int(np.floor(t.times[j]))
        if exit_record:
            day = max(day, max(used) + 1 if used else day)
        if day in used:
            continue
        used.add(day)
        values = {c.name: ("" if exit_record or observations[j, k] < 0 else c.categories[observations[j, k]])
                  for k, c in enumerate(model.channels)}
        rows.append({"case_id": case_id, "date": (dt.date(1970, 1, 1) + dt.timedelta(days=day)).isoformat(),
                     "coordinator": coordinator, **values,
                     **{name: int(t.covariates[j, k]) for k, name in enumerate(model.covariates)},
                     "stage_known": "Moved to residential care" if exit_record else "",
                     "contact_kind": "unscheduled" if t.unscheduled[j] else "scheduled"})
    rows.sort(key=lambda r: r["date"])
    return rows


def write_demo_model(path: Path) -> None:
    """The demo workspace's model: the template's text with the invented unscheduled-contact block added."""
    import json

    text = TEMPLATE.read_text(encoding="utf-8").rstrip()
    if not text.endswith("}"):
        raise ValueError(f"{TEMPLATE}: expected a JSON object")
    block = json.loads(dump_model(demo_model()))["unscheduled_contacts"]
    text = text.replace("is invented for the demo scenario.", "is invented for the demo scenario, the unscheduled "
                        "contact rates too.")
    text = text[:-1].rstrip() + ',\n  "unscheduled_contacts": ' + json.dumps(block) + "\n}\n"
    json.loads(text)  # still one valid JSON object
    path.write_text(text, encoding="utf-8")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=400)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--out", type=Path, default=HERE / "home_support_demo.csv")
    args = parser.parse_args(argv)
    n_rows = generate(args.cases, args.out, args.seed)
    if args.out == HERE / "home_support_demo.csv":
        write_demo_model(HERE / "home_support_model.json")
    print(f"wrote {args.cases} invented cases, {n_rows} contacts to {args.out} (seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
