"""Coverage of the reported 95% intervals on the demo model's structure (slow; not run in CI).

Issue 13: on the demo structure with 400-1000 cases Wald intervals covered the truth only about 77% of
the time. This study simulates caseloads from the demo model (resources/models/home_support_demo.json:
five stages, nine transitions, seven covariate effects, three channels, an exact-entry exit), fits each
with the default intervals (profile likelihood below 5,000 cases) and counts, per quantity, how often
an interval that is *not* marked weakly identified covers the true value.

Run::

    CASEVIEW_COVERAGE_REPLICATES=40 CASEVIEW_COVERAGE_CASES=400 \\
        pytest -m slow tests/fitting/test_coverage_demo.py -s

Each replicate's intervals are appended as one JSON line to ``CASEVIEW_COVERAGE_LOG`` (if set), so a
long run can be tabulated while it goes (``python tests/fitting/test_coverage_demo.py LOG``).
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

ROOT = Path(__file__).resolve().parents[2]
REPLICATES = int(os.environ.get("CASEVIEW_COVERAGE_REPLICATES", "40"))
N_CASES = int(os.environ.get("CASEVIEW_COVERAGE_CASES", "400"))
N_CONTACTS = 10
TARGET = 0.92


def demo_truth():
    from caseview.modelfile import load_model

    return load_model(ROOT / "resources" / "models" / "home_support_demo.json")


def simulate_demo_like(model, n_cases: int, rng: np.random.Generator):
    """Contacts every 2-16 weeks (+/- 3 days), lives_alone fixed per case, the balance programme starting
    part-way for about a third of cases, channels missing 34% / 6% / 6% of the time (as the demo)."""
    from hmm.simulate import simulate_caseload

    m = N_CONTACTS
    gaps = rng.integers(2, 17, size=(n_cases, m - 1)) * 7 + rng.integers(-3, 4, size=(n_cases, m - 1))
    days = np.concatenate([np.zeros((n_cases, 1)), np.cumsum(gaps, axis=1)], axis=1).astype(float)
    lives_alone = (rng.random(n_cases) < 0.45).astype(float)
    enrol_at = np.where(rng.random(n_cases) < 0.35, rng.integers(2, 8, size=n_cases), m + 1)
    programme = (np.arange(m)[None, :] >= enrol_at[:, None]).astype(float)
    covariates = np.stack([np.repeat(lives_alone[:, None], m, axis=1), programme], axis=2)
    return simulate_caseload(model, list(days), list(covariates), rng,
                             missing_probability=np.array([0.34, 0.06, 0.06]), exact_entry=True).timelines


def true_values(model) -> dict:
    """Every reported quantity of the true model, by the functions the fit reports with."""
    from hmm.fitting import parameter_spec
    from hmm.fitting.quantities import reported_quantities

    spec = parameter_spec(model)
    theta = spec.to_vector(model)
    out = {}
    for table in reported_quantities(spec):
        values = table.function(theta)
        out.update({name: float(v) for name, v, fixed in zip(table.names, values, table.fixed) if not fixed})
    return out


def one_replicate(replicate: int, model, truth: dict) -> dict:
    from hmm.fitting import fit_model

    rng = np.random.default_rng([20261203, replicate])
    timelines = simulate_demo_like(model, N_CASES, rng)
    started = time.perf_counter()
    # starting at the true model is usual in coverage studies (common practice, no source)
    result = fit_model(model, timelines, starts=1)
    rows = []
    for e in result.parameters + result.hazard_ratios + result.mean_time_in_stage + result.next_stage_probabilities:
        if e.fixed or e.name not in truth:
            continue
        shown = e.lower is not None and e.upper is not None and not e.weakly_identified
        rows.append({"name": e.name, "kind": e.interval_kind, "weak": e.weakly_identified, "shown": shown,
                     "covered": bool(shown and e.lower <= truth[e.name] <= e.upper)})
    return {"replicate": replicate, "seconds": round(time.perf_counter() - started, 1), "converged": result.converged,
            "interval_kind": result.interval_kind, "rows": rows}


def tabulate(records: list) -> tuple:
    """Per quantity: intervals shown, covered, weakly identified, profile share; and the pooled coverage."""
    table = {}
    for record in records:
        for row in record["rows"]:
            t = table.setdefault(row["name"], {"shown": 0, "covered": 0, "weak": 0, "profile": 0, "n": 0})
            t["n"] += 1
            t["shown"] += row["shown"]
            t["covered"] += row["covered"]
            t["weak"] += row["weak"]
            t["profile"] += row["kind"] == "profile"
    shown = sum(t["shown"] for t in table.values())
    pooled = sum(t["covered"] for t in table.values()) / max(shown, 1)
    return table, pooled


def format_table(table: dict, pooled: float, n_replicates: int) -> str:
    lines = [f"coverage of 95% intervals not marked weakly identified, {n_replicates} caseloads of {N_CASES} cases",
             f"  {'quantity':<62} {'shown':>5} {'cover':>6} {'weak':>4} {'profile':>7}"]
    for name, t in table.items():
        coverage = t["covered"] / t["shown"] if t["shown"] else float("nan")
        lines.append(f"  {name:<62} {t['shown']:>5} {coverage:>6.3f} {t['weak']:>4} {t['profile']:>7}")
    lines.append(f"  pooled over every shown interval: {pooled:.3f}")
    return "\n".join(lines)


@pytest.mark.slow
def test_intervals_not_marked_weak_cover_the_truth_at_least_92_percent():
    model = demo_truth()
    truth = true_values(model)
    log = os.environ.get("CASEVIEW_COVERAGE_LOG")
    records = []
    for replicate in range(REPLICATES):
        record = one_replicate(replicate, model, truth)
        records.append(record)
        if log:
            with open(log, "a", encoding="utf-8") as handle:
                handle.write(json.dumps(record) + "\n")
    table, pooled = tabulate(records)
    print("\n" + format_table(table, pooled, len(records)))
    assert pooled >= TARGET, format_table(table, pooled, len(records))
    # Per quantity: with true coverage 0.92 the count of covering intervals is Binomial(shown, 0.92)
    # (scipy.stats.binom); Bonferroni over the quantities at a 1% family error rate.
    alpha = 0.01 / len(table)
    for name, t in table.items():
        if t["shown"]:
            assert t["covered"] >= scipy.stats.binom.ppf(alpha, t["shown"], TARGET), (name, t)


if __name__ == "__main__":   # tabulate a running study's log
    records = [json.loads(line) for line in Path(sys.argv[1]).read_text(encoding="utf-8").splitlines() if line]
    print(format_table(*tabulate(records), len(records)))
    print(f"seconds per replicate: median {np.median([r['seconds'] for r in records]):.0f}")
