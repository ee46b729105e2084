"""Scoring speed with and without the timing of unscheduled contacts (issue 17 target: within 1.2x).

The caseload is ``benchmarks/generate.py``'s irregular layout (100,000 invented cases by default),
scored on its last day with :func:`caseview.scoring.score_loaded` (forward pass, "now", forecast and
reach: everything ``caseview score`` computes after loading) under

* the demo model (timing-blind),
* the same model with the demo's invented ``unscheduled_contacts`` block, every contact scheduled,
* that model with a third of the contacts after each first one marked unscheduled (chosen at random).

Each variant is timed ``--repeat`` times, interleaved, and the best time is reported.

Run:  python benchmarks/timing_score.py --cases 100000
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from generate import DEFAULT_SEED, simulate  # noqa: E402

from caseview.scoring import score_loaded  # noqa: E402
from caseview.storage.caseload import Caseload  # noqa: E402
from hmm import Timelines  # noqa: E402
from hmm.model import UnscheduledContacts  # noqa: E402

#: The demo's invented unscheduled contacts per year in each stage (demo_cases/generate_demo.py).
PER_YEAR = (0.8, 2.0, 4.5, 10.0, 0.0)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)
    sim = simulate(args.cases, "irregular", DEFAULT_SEED)
    t = sim["timelines"]
    timelines = Timelines(t.offsets, sim["times"].astype(float), t.observations, t.allowed_stages, t.covariates)
    rng = np.random.default_rng(1)
    marked = rng.random(timelines.n_contacts) < 1 / 3
    marked[timelines.first_index] = False
    with_kinds = replace(timelines, unscheduled=marked)
    blind = sim["model"]
    timing = replace(blind, unscheduled_contacts=UnscheduledContacts(np.array(PER_YEAR) / 365.25,
                                                                     {"lives_alone": 0.25}))
    as_of = int(timelines.times.max())
    case_ids = np.char.mod("HS-%06d", np.arange(1, timelines.n_cases + 1)).astype(object)

    def caseload(tl):
        return Caseload(case_ids, np.full(tl.n_cases, "", dtype=object), tl.times.astype(np.int64), tl, {})

    variants = {"timing-blind": (blind, caseload(timelines)),
                "timing block, all scheduled": (timing, caseload(timelines)),
                "timing block, 1/3 unscheduled": (timing, caseload(with_kinds))}
    best = {name: np.inf for name in variants}
    for _ in range(args.repeat):
        for name, (model, loaded) in variants.items():
            began = time.perf_counter()
            score_loaded(loaded, model, as_of, 90.0)
            best[name] = min(best[name], time.perf_counter() - began)
    print(f"{timelines.n_cases:,} cases, {timelines.n_contacts:,} contacts; best of {args.repeat}")
    for name, seconds in best.items():
        print(f"  {name:<32} {seconds:7.2f} s   {seconds / best['timing-blind']:.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
