"""Generate invented caseloads of any size for the benchmarks (deterministic for a given seed).

Everything is simulated from the invented demo model (resources/models/home_support_demo.json)
with the exact (Gillespie) simulator in ``hmm.simulate``; no real people or data.

Two layouts, both written as timeline CSV files in the import layout
(``case_id, date, coordinator, <channels>, <covariates>, stage_known``):

* ``irregular``: 14 scheduled contacts per case with gaps of 2 to 16 weeks (+-3 days), first
  contacts spread over a year, covariates as in the scenario (``lives_alone`` fixed per case,
  ``balance_programme`` switching on at a random contact for about a third of cases), values
  missing at random (mobility 34 %, the other channels 6 %), and a contact recording the exact
  date of a move to residential care (``stage_known``) when it happens, after which the case stops.
  About 12 recorded contacts per case on average (the moves cut some timelines short).
* ``two-channel``: 6 to 18 contacts per case (uniform), 30 days apart, all from the origin date,
  simulated from the demo model folded to two channels (``mobility``; ``concern`` as none/any: 6 joint
  symbols), no covariates, nothing missing, no exact-entry contacts (issue 19's second comparison).
* ``equal``: 12 contacts 30 days apart for every case, all starting on the origin date, nothing
  missing and no exact-entry contacts, so that a discrete-time library (hmmlearn) can take the same
  sequences. Covariates are constant per case (``--covariates constant``; 4 patterns, so the
  reference gets one model per pattern) or all zero (``--covariates zero``).

For the ``equal`` layout a companion ``.npz`` holds what the hmmlearn reference needs:
``symbols`` (n_contacts,) joint symbol over the channels (mixed radix, first channel most
significant), ``lengths`` (n_cases,), ``case_covariates`` (n_cases, n_covariates), ``gap``.

Run::

    python benchmarks/generate.py --cases 100000 --layout irregular --out /tmp/irregular.csv
    python benchmarks/generate.py --cases 100000 --layout equal --out /tmp/equal.csv
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from caseview.modelfile import parse_model  # noqa: E402
from hmm.simulate import simulate_caseload  # noqa: E402

DEMO_MODEL = ROOT / "resources" / "models" / "home_support_demo.json"
ORIGIN = np.datetime64("2024-01-08", "D")
COORDINATORS = np.array(["C1", "C2", "C3", "C4"], dtype=object)
CONTACTS_PER_CASE = 12
IRREGULAR_SCHEDULED = 14   # scheduled contacts; moves to residential care cut ~1/7 of them -> ~12 recorded
EQUAL_GAP = 30.0
TWO_CHANNEL_CONTACTS = (6, 18)  # contacts per case in the two-channel layout, inclusive
DEFAULT_SEED = 20261202


# ---------------------------------------------------------------- models
def demo_model_json(covariates: bool = True, exact_entry: bool = True) -> dict:
    """The demo model file as a dict; without covariates (and effects) if ``covariates`` is False,
    without exact-entry stages if ``exact_entry`` is False (the equal-gap layout records no entries,
    so cases go on being seen in the absorbing stage, as a discrete-time library assumes)."""
    data = json.loads(DEMO_MODEL.read_text(encoding="utf-8"))
    if not exact_entry:
        data.pop("exact_entry_stages", None)
    if not covariates:
        data["covariates"] = []
        for t in data["transitions"]:
            t.pop("effects", None)
        data["name"] = data["name"] + " - no covariates (benchmark)"
    return data


def two_channel_model_json() -> dict:
    """The demo model with two channels (``mobility`` with 3 categories, ``concern`` folded to none/any),
    no covariates and no exact-entry stages: 6 joint symbols, the caseload of issue 19's second score
    comparison."""
    data = demo_model_json(covariates=False, exact_entry=False)
    by_name = {c["name"]: c for c in data["channels"]}
    concern = by_name["concern"]
    concern["categories"] = ["none", "any"]
    concern["probabilities"] = {stage: [row[0], round(1.0 - row[0], 10)] for stage, row in concern["probabilities"].items()}
    data["channels"] = [by_name["mobility"], concern]
    data["name"] = "Home support demo - two channels, no covariates (benchmark)"
    return data


def model_json(layout: str, covariates: bool = True) -> dict:
    """The model a layout is simulated from (what ``--model-out`` writes)."""
    if layout == "two-channel":
        return two_channel_model_json()
    return demo_model_json(covariates, layout == "irregular")


def start_model_json(covariates: bool = False, exact_entry: bool = False) -> dict:
    """Starting values for the fit comparison: the demo model, deliberately off.

    Every rate times 1.8, every emission row mixed 60/40 with the uniform row, the initial
    distribution mixed 50/50 with uniform over the stages it allows. Effects (if kept) set to 0.
    """
    data = demo_model_json(covariates, exact_entry)
    for t in data["transitions"]:
        t["rate"] = round(t["rate"] * 1.8, 8)
        if "effects" in t:
            t["effects"] = {k: 0.0 for k in t["effects"]}
    for c in data["channels"]:
        k = len(c["categories"])
        for stage, row in c["probabilities"].items():
            mixed = [0.6 * p + 0.4 / k for p in row]
            mixed[-1] = 1.0 - sum(mixed[:-1])
            c["probabilities"][stage] = [round(p, 10) for p in mixed]
    allowed = [s for s, p in data["initial"].items() if p > 0]
    for s in data["initial"]:
        data["initial"][s] = 0.5 * data["initial"][s] + (0.5 / len(allowed) if s in allowed else 0.0)
    data["name"] = "benchmark start values (demo model perturbed)"
    return data


# ---------------------------------------------------------------- simulation
def _irregular_schedule(n_cases: int, rng: np.random.Generator) -> tuple:
    """Contact days (n_cases, m) since the origin and per-contact covariates (n_cases, m, 2)."""
    m = IRREGULAR_SCHEDULED
    first = rng.integers(0, 366, size=n_cases)
    gaps = rng.integers(2, 17, size=(n_cases, m - 1)) * 7 + rng.integers(-3, 4, size=(n_cases, m - 1))
    days = np.concatenate([first[:, None], first[:, None] + np.cumsum(gaps, axis=1)], axis=1)
    lives_alone = (rng.random(n_cases) < 0.45).astype(float)
    enrols = rng.random(n_cases) < 0.35
    enrol_at = np.where(enrols, rng.integers(2, 8, size=n_cases), m + 1)
    programme = (np.arange(m)[None, :] >= enrol_at[:, None]).astype(float)
    covariates = np.stack([np.repeat(lives_alone[:, None], m, axis=1), programme], axis=2)
    return days, covariates


def simulate(n_cases: int, layout: str, seed: int, covariates: str = "constant") -> dict:
    """Simulate a caseload; returns per-contact columns (numpy arrays) and extras.

    Returns
    -------
    dict with ``model``, ``timelines`` (hmm.Timelines, times in days since the origin),
    ``case_of_contact`` (n_contacts,), ``coordinator_of_case`` (n_cases,), ``exact_entry`` (n_contacts,)
    """
    rng = np.random.default_rng(seed)
    with_covariates = not (layout == "equal" and covariates == "zero") and layout != "two-channel"
    model = parse_model(json.dumps(model_json(layout, with_covariates)), "demo model")
    if layout == "irregular":
        days, cov = _irregular_schedule(n_cases, rng)
        contact_times = list(days.astype(float))
        cov_list = list(cov)
        missing = np.array([0.34, 0.06, 0.06])
        sim = simulate_caseload(model, contact_times, cov_list, rng, missing_probability=missing,
                                exact_entry=True)
        times = np.maximum(np.ceil(sim.timelines.times), 0)
        # An exact entry is recorded on the day after it happened (whole days); never before the last contact.
        previous = np.concatenate([[-1.0], times[:-1]])
        same_case = np.concatenate([[False], sim.case_of_contact[1:] == sim.case_of_contact[:-1]])
        times = np.where(sim.exact_entry_contact & same_case, np.maximum(times, previous + 1), times)
    elif layout == "equal":
        contact_times = [EQUAL_GAP * np.arange(CONTACTS_PER_CASE, dtype=float)] * n_cases
        if with_covariates:
            per_case = np.stack([(rng.random(n_cases) < 0.45), (rng.random(n_cases) < 0.35)], axis=1).astype(float)
        else:
            per_case = np.zeros((n_cases, 0))
        sim = simulate_caseload(model, contact_times, per_case, rng, missing_probability=0.0, exact_entry=False)
        times = sim.timelines.times
    elif layout == "two-channel":
        counts = rng.integers(TWO_CHANNEL_CONTACTS[0], TWO_CHANNEL_CONTACTS[1] + 1, size=n_cases)
        contact_times = [EQUAL_GAP * np.arange(k, dtype=float) for k in counts]
        sim = simulate_caseload(model, contact_times, np.zeros((n_cases, 0)), rng, missing_probability=0.0,
                                exact_entry=False)
        times = sim.timelines.times
    else:
        raise ValueError(f"layout must be 'irregular', 'equal' or 'two-channel', got {layout!r}")
    coordinator_of_case = COORDINATORS[rng.integers(0, COORDINATORS.size, size=n_cases)]
    return {"model": model, "timelines": sim.timelines, "times": times, "case_of_contact": sim.case_of_contact,
            "coordinator_of_case": coordinator_of_case, "exact_entry": sim.exact_entry_contact}


def case_codes(n_cases: int) -> np.ndarray:
    """Invented case codes HS-000001 ...; from a million cases on HS-0000-001 ... (the identifier screen
    refuses a case code with a run of 7 digits as a record number), sorted like the cases."""
    numbers = np.arange(1, n_cases + 1)
    if n_cases < 1_000_000:
        return np.char.mod("HS-%06d", numbers).astype(object)
    return np.char.add(np.char.mod("HS-%04d-", numbers // 1000), np.char.mod("%03d", numbers % 1000)).astype(object)


def write_csv(sim: dict, out: Path) -> int:
    """Write the import-layout CSV (vectorised column building, pandas writer). Returns rows written."""
    import pandas as pd

    model, timelines = sim["model"], sim["timelines"]
    case = sim["case_of_contact"]
    case_ids = case_codes(timelines.n_cases)
    columns = {
        "case_id": case_ids[case],
        "date": np.datetime_as_string(ORIGIN + sim["times"].astype(np.int64)),
        "coordinator": sim["coordinator_of_case"][case],
    }
    for c, channel in enumerate(model.channels):
        text = np.array(list(channel.categories) + [""], dtype=object)
        columns[channel.name] = text[timelines.observations[:, c]]   # code -1 picks ""
    full = demo_model_json(True)
    for k, entry in enumerate(full["covariates"]):
        name = entry["name"]
        if name in model.covariates:
            values = timelines.covariates[:, model.covariates.index(name)]
        else:
            values = np.zeros(timelines.n_contacts)
        columns[name] = values.astype(np.int64)
    stage_known = np.full(timelines.n_contacts, "", dtype=object)
    if sim["exact_entry"].any():
        single = timelines.allowed_stages[sim["exact_entry"]].argmax(axis=1)
        stage_known[sim["exact_entry"]] = np.array(model.stages, dtype=object)[single]
    columns["stage_known"] = stage_known
    frame = pd.DataFrame(columns)
    if full["covariates"] and not model.covariates:
        frame = frame.drop(columns=[e["name"] for e in full["covariates"]])
    out.parent.mkdir(parents=True, exist_ok=True)
    frame.to_csv(out, index=False, lineterminator="\n")
    return len(frame)


def write_reference_arrays(sim: dict, out: Path) -> None:
    """The equal-gap caseload as joint symbols for hmmlearn (see module docstring)."""
    model, timelines = sim["model"], sim["timelines"]
    sizes = [ch.n_categories for ch in model.channels]
    symbols = np.zeros(timelines.n_contacts, dtype=np.int64)
    for c, size in enumerate(sizes):
        if np.any(timelines.observations[:, c] < 0):
            raise ValueError("joint symbols need every channel observed at every contact")
        symbols = symbols * size + timelines.observations[:, c]
    case_covariates = timelines.covariates[timelines.first_index]
    np.savez(out, symbols=symbols, lengths=timelines.n_contacts_per_case, case_covariates=case_covariates,
             gap=np.array(EQUAL_GAP), origin=np.array(str(ORIGIN)))


def last_day(sim: dict) -> str:
    """The latest contact date in the caseload (YYYY-MM-DD), a natural as-of date."""
    return str(ORIGIN + int(sim["times"].max()))


def generate(n_cases: int, layout: str, out: Path, seed: int = DEFAULT_SEED, covariates: str = "constant") -> dict:
    """Simulate and write; returns a summary dict (rows, cases, last_day, seconds, paths)."""
    start = time.perf_counter()
    sim = simulate(n_cases, layout, seed, covariates)
    rows = write_csv(sim, out)
    summary = {"cases": n_cases, "contacts": rows, "layout": layout, "seed": seed, "csv": str(out),
               "last_day": last_day(sim), "covariates": list(sim["model"].covariates)}
    if layout in ("equal", "two-channel"):
        npz = out.with_suffix(".npz")
        write_reference_arrays(sim, npz)
        summary["arrays"] = str(npz)
    summary["seconds"] = time.perf_counter() - start
    return summary


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=1000)
    parser.add_argument("--layout", choices=("irregular", "equal", "two-channel"), default="irregular")
    parser.add_argument("--covariates", choices=("constant", "zero"), default="constant",
                        help="equal layout only: per-case constant covariates, or none (model without covariates)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--model-out", type=Path, help="also write the model the data was simulated from")
    parser.add_argument("--start-model-out", type=Path,
                        help="also write perturbed starting values (for the fit comparison)")
    args = parser.parse_args(argv)
    summary = generate(args.cases, args.layout, args.out, args.seed, args.covariates)
    with_covariates = bool(summary["covariates"])
    if args.model_out:
        args.model_out.write_text(json.dumps(model_json(args.layout, with_covariates), indent=2), encoding="utf-8")
    if args.start_model_out:
        args.start_model_out.write_text(json.dumps(start_model_json(with_covariates, args.layout == "irregular"),
                                                   indent=2), encoding="utf-8")
    print(json.dumps(summary))
    return 0


if __name__ == "__main__":
    sys.exit(main())
