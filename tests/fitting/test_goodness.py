"""Goodness of fit: observed versus expected transitions between contacts, bootstrap p-value, occupancy over time."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from fitting_helpers import irregular_times, progressive_equal_rates, simulate, three_stage_model
from hmm.fitting import goodness_of_fit, occupancy_over_calendar_time, one_step_predictions
from hmm.model import Channel, StageModel, Transition
from hmm.simulate import simulate_caseload
from hmm.timelines import Timelines


def two_state_model(away: float, back: float) -> StageModel:
    """Two stages observed without error (identity emission)."""
    return StageModel(stages=("A", "B"), initial=np.array([0.5, 0.5]),
                      transitions=(Transition(0, 1, away), Transition(1, 0, back)),
                      channels=(Channel("seen", ("a", "b"), np.eye(2)),), name="two-state")


def timelines_from(times: list, codes: list, n_stages: int, covariates: list | None = None) -> Timelines:
    counts = [len(t) for t in times]
    n = sum(counts)
    return Timelines(offsets=np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
                     times=np.concatenate(times).astype(float),
                     observations=np.concatenate(codes).astype(np.int16).reshape(n, -1),
                     allowed_stages=np.ones((n, n_stages), dtype=bool),
                     covariates=np.zeros((n, 0)) if covariates is None else np.concatenate(covariates).reshape(n, -1))


def cell_table(result) -> dict:
    """{(from, to): (observed, expected)} summed over gap bands and covariate groups."""
    table = {}
    for source, target, o, e in zip(result.from_group, result.to_category, result.observed, result.expected):
        old = table.get((source, target), (0.0, 0.0))
        table[(source, target)] = (old[0] + o, old[1] + e)
    return table


# ------------------------------------------------------------------ expected counts against closed forms
@pytest.mark.parametrize("n_cases", [1, 7])
def test_identity_emission_two_state_expected_counts_are_closed_form(rng, n_cases):
    away, back = 0.02, 0.05
    model = two_state_model(away, back)
    times = [np.concatenate([[0.0], np.cumsum(rng.integers(1, 90, size=5))]) for _ in range(n_cases)]
    codes = [rng.integers(0, 2, size=6) for _ in range(n_cases)]
    result = goodness_of_fit(model, timelines_from(times, codes, 2), gap_bands=1, bootstrap=0)

    # Ross, Introduction to Probability Models, ch. 6 (two-state continuous-time chain):
    # P00(t) = mu/(lambda+mu) + lambda/(lambda+mu) exp(-(lambda+mu) t), P11(t) likewise with roles swapped.
    total = away + back
    p_stay = {0: lambda t: back / total + away / total * np.exp(-total * t),
              1: lambda t: away / total + back / total * np.exp(-total * t)}
    expected = {(a, b): 0.0 for a in range(2) for b in range(2)}
    observed = dict(expected)
    for t, c in zip(times, codes):
        for gap, first, second in zip(np.diff(t), c[:-1], c[1:]):
            stay = p_stay[first](gap)
            expected[(first, first)] += stay
            expected[(first, 1 - first)] += 1 - stay
            observed[(first, second)] += 1
    table = cell_table(result)
    for (a, b), value in expected.items():
        if observed[(a, 0)] + observed[(a, 1)] == 0:
            assert ("ab"[a], "ab"[b]) not in table
            continue
        o, e = table[("ab"[a], "ab"[b])]
        assert o == observed[(a, b)]
        assert e == pytest.approx(value, rel=1e-9, abs=1e-12)
    assert np.isnan(result.p_value) and result.n_bootstrap == 0


def _naive_predictions(model: StageModel, timelines: Timelines) -> np.ndarray:
    """Per case, per contact: forward filter written out with scipy.linalg.expm (reference for the test)."""
    emissions = model.emission_matrices()
    predicted = np.zeros((timelines.n_contacts, model.n_stages))
    for case in range(timelines.n_cases):
        rows = range(timelines.offsets[case], timelines.offsets[case + 1])
        belief = None
        for j in rows:
            if belief is None:
                prior = np.asarray(model.initial, dtype=float)
            else:
                generator = model.generator(timelines.covariates[j - 1])
                prior = belief @ scipy.linalg.expm(generator * (timelines.times[j] - timelines.times[j - 1]))
            predicted[j] = prior
            likelihood = np.ones(model.n_stages)
            for c, table in enumerate(emissions):
                if timelines.observations[j, c] >= 0:
                    likelihood *= table[:, timelines.observations[j, c]]
            belief = prior * likelihood / (prior * likelihood).sum()
    return predicted


@pytest.mark.parametrize("which", ["eigen path (three stages, distinct rates)",
                                   "expm fallback (defective chain, equal rates)"])
def test_predictions_and_expected_counts_match_scipy_expm(rng, which):
    model = three_stage_model(exact_entry=False) if which.startswith("eigen") else progressive_equal_rates()
    sim = simulate(model, rng, n_cases=6, n_contacts=5, missing=0.2, exact_entry=False)
    timelines = sim.timelines
    # scipy.linalg.expm (Al-Mohy & Higham 2009) applied contact by contact, outside the engine
    reference = _naive_predictions(model, timelines)
    ours = one_step_predictions(model, timelines)
    np.testing.assert_allclose(ours.predicted, reference, atol=1e-10)

    channel = 0
    result = goodness_of_fit(model, timelines, channel=channel, gap_bands=1, covariate_groups=False, bootstrap=0)
    categories = model.channels[channel].categories
    codes = timelines.observations[:, channel]
    probabilities = reference @ model.emission_matrices()[channel]
    expected = np.zeros((len(categories), len(categories)))
    for j in range(timelines.n_contacts):
        if j in set(timelines.first_index) or codes[j] < 0 or codes[j - 1] < 0:
            continue
        expected[codes[j - 1]] += probabilities[j]
    table = cell_table(result)
    for a, source in enumerate(categories):
        for b, target in enumerate(categories):
            if (source, target) in table:
                assert table[(source, target)][1] == pytest.approx(expected[a, b], abs=1e-9)
            else:
                assert expected[a].sum() == 0


def test_exact_entry_stage_is_left_out_of_predictions_at_ordinary_contacts(rng):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=80, n_contacts=8)
    predictions = one_step_predictions(model, sim.timelines)
    gone = model.stage_index("Gone")
    usable = predictions.usable
    # an ordinary contact is never in the exact-entry stage (its entry is always recorded)
    assert np.all(predictions.predicted[usable, gone] == 0)
    np.testing.assert_allclose(predictions.predicted[usable].sum(axis=1), 1.0)
    assert not usable[sim.exact_entry_contact].any()


# ------------------------------------------------------------------ properties of the table
def test_expected_counts_sum_to_observed_counts_in_every_group(rng):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=120, n_contacts=8)
    for group_by in ("category", "stage"):
        result = goodness_of_fit(model, sim.timelines, group_by=group_by, gap_bands=3, bootstrap=0)
        groups = {}
        for key, o, e in zip(zip(result.channel, result.from_group, result.gap_band, result.covariate_group),
                             result.observed, result.expected):
            old = groups.get(key, (0.0, 0.0))
            groups[key] = (old[0] + o, old[1] + e)
        # each pair adds 1 to its group's observed total and a probability vector (sum 1) to its expected
        # total (property of the construction, no source)
        for o, e in groups.values():
            assert e == pytest.approx(o, rel=1e-9)
        assert sum(o for o, _ in groups.values()) == result.n_pairs
        assert result.statistic == pytest.approx(result.contributions.sum())
        assert {"Well", "Unwell"} >= set(result.from_group) if group_by == "stage" else True
        assert len(set(result.gap_band)) == 3 and len(set(result.covariate_group)) == 2


def test_options_and_bad_input(rng):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=40, n_contacts=5)
    one = goodness_of_fit(model, sim.timelines, channel="report", bootstrap=0)
    assert set(one.channel) == {"report"}
    with pytest.raises(ValueError, match="no channel 'nope'"):
        goodness_of_fit(model, sim.timelines, channel="nope", bootstrap=0)
    with pytest.raises(ValueError, match="group_by"):
        goodness_of_fit(model, sim.timelines, group_by="colour", bootstrap=0)
    with pytest.raises(ValueError, match="gap_bands"):
        goodness_of_fit(model, sim.timelines, gap_bands=0, bootstrap=0)
    lonely = timelines_from([np.array([0.0])], [np.array([0])], 2)
    with pytest.raises(ValueError, match="nothing to compare"):
        goodness_of_fit(two_state_model(0.1, 0.1), lonely, bootstrap=0)
    text = one.format_table()
    assert "channel report" in text and "Pearson-type statistic" in text


def test_bootstrap_is_reproducible_and_cancellable(rng, seed):
    model = three_stage_model()
    sim = simulate(model, rng, n_cases=60, n_contacts=6)
    first = goodness_of_fit(model, sim.timelines, bootstrap=9, rng=np.random.default_rng(seed))
    again = goodness_of_fit(model, sim.timelines, bootstrap=9, rng=np.random.default_rng(seed))
    np.testing.assert_array_equal(first.bootstrap_statistics, again.bootstrap_statistics)
    assert first.p_value == pytest.approx((1 + np.sum(first.bootstrap_statistics >= first.statistic)) / 10)

    class Stop(Exception):
        pass

    seen = []

    def callback(fraction):
        seen.append(fraction)
        if fraction >= 0.3:
            raise Stop

    with pytest.raises(Stop):
        goodness_of_fit(model, sim.timelines, bootstrap=9, rng=np.random.default_rng(seed), callback=callback)
    assert seen and seen == sorted(seen)


def test_replicates_keep_the_contact_schedule_and_recording_pattern(rng, seed):
    from hmm.fitting.goodness import _replicate, _schedule

    model = three_stage_model()
    sim = simulate(model, rng, n_cases=50, n_contacts=6, missing=0.3)
    schedule = _schedule(model, sim.timelines)
    copy = _replicate(model, schedule, np.random.default_rng(seed))
    ordinary = copy.allowed_stages.all(axis=1)
    scheduled_times = np.concatenate(schedule["times"])
    # every ordinary contact of a replicate is a scheduled contact, missing where the original was missing
    rows = []
    for case in range(copy.n_cases):
        mine = np.arange(copy.offsets[case], copy.offsets[case + 1])
        mine = mine[ordinary[mine]]
        start = schedule["offsets"][case]
        np.testing.assert_array_equal(copy.times[mine], scheduled_times[start:start + mine.size])
        rows.append((mine, np.arange(start, start + mine.size)))
    mine = np.concatenate([r[0] for r in rows])
    theirs = np.concatenate([r[1] for r in rows])
    np.testing.assert_array_equal(copy.observations[mine] < 0, schedule["missing"][theirs])


def test_recorded_stages_and_continuous_covariates(rng, seed):
    import dataclasses

    from hmm.fitting.goodness import _replicate, _schedule

    model = three_stage_model()
    sim = simulate(model, rng, n_cases=60, n_contacts=6)
    t = sim.timelines
    # a stage recorded directly at some ordinary contacts (the true one), and a covariate with many values
    known = (~sim.exact_entry_contact) & (rng.random(t.n_contacts) < 0.2)
    allowed = t.allowed_stages.copy()
    allowed[known] = False
    allowed[known, sim.true_stages[known]] = True
    age = np.round(rng.uniform(60, 95, t.n_cases))[t.case_of_contact][:, None]
    t = dataclasses.replace(t, allowed_stages=allowed, covariates=np.hstack([t.covariates[:, :0], age]))
    model = dataclasses.replace(model, covariates=("age",), transitions=tuple(
        dataclasses.replace(tr, effects={"age": 0.01} if tr.effects else {}) for tr in model.transitions))
    result = goodness_of_fit(model, t, bootstrap=3, rng=np.random.default_rng(seed))
    median = np.median(age)
    # a covariate with more than two values is split at its median (common practice, no source)
    assert set(result.covariate_group) == {f"age<={median:g}", f"age>{median:g}"}
    copy = _replicate(model, _schedule(model, t), np.random.default_rng(seed))
    recorded = ~copy.allowed_stages.all(axis=1) & (copy.observations >= 0).any(axis=1)
    assert recorded.any() and np.all(copy.allowed_stages[recorded].sum(axis=1) == 1)
    many = goodness_of_fit(model, t, max_covariate_groups=1, bootstrap=0)
    assert set(many.covariate_group) == {"all"}


# ------------------------------------------------------------------ the bootstrap test does its job
def test_bootstrap_p_value_not_small_for_the_true_model_and_small_for_a_wrong_one(seed):
    truth = three_stage_model()
    sim = simulate(truth, np.random.default_rng(seed), n_cases=150, n_contacts=8)
    fair = goodness_of_fit(truth, sim.timelines, bootstrap=99, rng=np.random.default_rng(seed + 1))
    # Under the model a parametric-bootstrap p-value is (discretely) uniform on {1/100, ..., 1}, so p > 0.01
    # fails by chance 1% of the time (Davison & Hinkley 1997, Bootstrap Methods and their Application, 4.2).
    assert fair.p_value > 0.01

    # every rate five times faster: with 600 cases the statistic exceeded all 99 replicates in 20 of 20 trial
    # seeds (a simulation run while writing this test, not an outside source)
    fast = StageModel(stages=truth.stages, initial=truth.initial,
                      transitions=tuple(Transition(t.source, t.target, 5 * t.rate, t.effects)
                                        for t in truth.transitions),
                      channels=truth.channels, covariates=truth.covariates,
                      exact_entry_stages=truth.exact_entry_stages)
    moved = simulate(fast, np.random.default_rng(seed + 2), n_cases=600, n_contacts=8)
    wrong = goodness_of_fit(truth, moved.timelines, bootstrap=99, rng=np.random.default_rng(seed + 3))
    assert wrong.p_value < 0.05


def test_refitting_replicates_runs_and_reports(seed):
    truth = three_stage_model(with_covariate=False)
    sim = simulate(truth, np.random.default_rng(seed), n_cases=60, n_contacts=6)
    fractions = []
    result = goodness_of_fit(truth, sim.timelines, channel="check", bootstrap=2, refit=True,
                             rng=np.random.default_rng(seed), callback=fractions.append)
    assert result.refit and result.n_bootstrap == 2 and np.all(np.isfinite(result.bootstrap_statistics))
    assert fractions[-1] == 1.0 and np.all(np.diff(fractions) >= 0)
    assert "each replicate refitted" in result.format_table()


# ------------------------------------------------------------------ occupancy over calendar time
def test_occupancy_expected_shares_match_monte_carlo(seed):
    model = three_stage_model(exact_entry=False)
    rng = np.random.default_rng(seed)
    n_cases, n_contacts = 60, 6
    times = irregular_times(rng, n_cases, n_contacts)
    covariates = rng.integers(0, 2, size=(n_cases, 1)).astype(float)
    edges = np.linspace(0, 300, 6)
    observed, expected, errors = [], [], []
    for _ in range(150):
        sim = simulate_caseload(model, times, covariates, rng)
        occupancy = occupancy_over_calendar_time(model, sim.timelines, edges)
        observed.append(occupancy.observed)
        expected.append(occupancy.expected)
        errors.append(occupancy.standard_error)
    observed, expected, errors = np.array(observed), np.array(expected), np.array(errors)
    # E[recorded - predicted] = 0 at every contact (one-step-ahead predictions are conditional expectations),
    # so the Monte Carlo mean of observed shares equals that of expected shares within a few Monte Carlo
    # standard errors (Williams, Probability with Martingales, ch. 10: martingale differences have mean 0).
    difference = observed - expected
    valid = np.all(np.isfinite(difference), axis=0) & (occupancy.n_contacts > 0)
    mean = difference.mean(axis=0)[valid]
    error = difference.std(axis=0, ddof=1)[valid] / np.sqrt(difference.shape[0])
    assert np.all(np.abs(mean) < 4 * error + 1e-12)
    # and the reported standard error is the spread of observed - expected (martingale differences are
    # uncorrelated, so the variance of their sum is the sum of p (1 - p); same source)
    spread = difference.std(axis=0, ddof=1)[valid]
    ratio = spread / np.sqrt(np.mean(errors ** 2, axis=0))[valid]
    assert 0.8 < np.median(ratio) < 1.2


def test_occupancy_first_contacts_follow_the_initial_distribution():
    model = three_stage_model(exact_entry=False)
    times = [np.array([0.0, 50.0]), np.array([0.0, 70.0]), np.array([10.0])]
    codes = [np.array([[0, 1], [1, 2]]), np.array([[1, -1], [0, 0]]), np.array([[0, 0]])]
    timelines = timelines_from(times, codes, 3, [np.zeros((2, 1)), np.ones((2, 1)), np.zeros((1, 1))])
    occupancy = occupancy_over_calendar_time(model, timelines, [0.0, 20.0, 80.0])
    # a first contact is predicted from the initial distribution alone: P(category) = initial @ E
    # (definition of the one-step-ahead prediction, no source)
    first_bin = model.initial @ model.emission_matrices()[0]
    check = [i for i, name in enumerate(occupancy.channel) if name == "check"]
    np.testing.assert_allclose(occupancy.expected[check, 0], first_bin)
    np.testing.assert_allclose(occupancy.observed[check, 0], [2 / 3, 1 / 3])
    assert occupancy.n_contacts[check[0]].tolist() == [3, 2]
    np.testing.assert_allclose(occupancy.bin_middles, [10.0, 50.0])


# ------------------------------------------------------------------ the command
def test_check_fit_command_prints_writes_and_changes_nothing_but_the_audit_trail(tmp_path):
    import csv

    from caseview.storage import Workspace
    from cli_runner import run_cli as run

    ws = tmp_path / "demo.cvw"
    assert run("demo", ws).returncode == 0
    with Workspace.open(ws) as w:
        versions_before = [(v.id, v.is_current) for v in w.model_versions()]
        contacts_before = w.contact_count()
    table, occupancy = tmp_path / "table.csv", tmp_path / "occupancy.csv"
    proc = run("check-fit", ws, "--bootstrap", 9, "--seed", 3, "--out", table, "--occupancy-out", occupancy)
    assert proc.returncode == 0, proc.stderr
    assert "Pearson-type statistic" in proc.stdout and "bootstrap p-value" in proc.stdout
    assert "Advisory only" in proc.stdout and "Occupancy over calendar time" in proc.stdout
    rows = list(csv.DictReader(open(table, encoding="utf-8")))
    assert {r["channel"] for r in rows} == {"mobility", "falls", "concern"}
    assert sum(float(r["observed"]) for r in rows) == pytest.approx(sum(float(r["expected"]) for r in rows), rel=1e-6)
    shares = list(csv.DictReader(open(occupancy, encoding="utf-8")))
    assert len(shares) == 9 * 12 and shares[0]["bin_start"][:2] == "20"
    with Workspace.open(ws) as w:
        assert [(v.id, v.is_current) for v in w.model_versions()] == versions_before
        assert w.contact_count() == contacts_before
        last = w.audit_entries()[-1]
        assert last.action == "model.fit_check" and last.details["bootstrap"] == 9

    bad = run("check-fit", ws, "--channel", "nope")
    assert bad.returncode == 2 and "no channel 'nope'" in bad.stderr and "Traceback" not in bad.stderr
    assert len(bad.stderr.strip().splitlines()) == 1
    bad = run("check-fit", ws, "--gap-bands", 0)
    assert bad.returncode == 2 and "--gap-bands" in bad.stderr and "Traceback" not in bad.stderr
