"""Outlook numbers against summed per-case forecasts, quadrature and Monte Carlo simulation of the caseload."""

from __future__ import annotations

import datetime as dt
from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import quad_vec
from scipy.linalg import expm

from caseview.followup.occupancy import occupancy_integrals
from caseview.followup.outlook import FOLLOW_UP_ROW, compute_outlook, month_ends, open_case_rows
from caseview.followup.referrals import DAYS_PER_MONTH, ReferralAssumption
from hmm.forecasting import occupancy_over_time
from hmm.simulate import simulate_caseload, simulate_path
from outlook_helpers import AS_OF, scored_caseload

NONE = ReferralAssumption("none", 0.0, covariates=np.zeros((1, 2)), weights=np.ones(1))


def test_month_ends_start_after_the_as_of_date():
    assert month_ends(dt.date(2026, 11, 30), 3) == [dt.date(2026, 12, 31), dt.date(2027, 1, 31), dt.date(2027, 2, 28)]
    assert month_ends(dt.date(2026, 11, 15), 2) == [dt.date(2026, 11, 30), dt.date(2026, 12, 31)]


@pytest.mark.parametrize("method", ["eigen", "expm", "auto"])
def test_occupancy_integrals_are_the_time_integrals_of_expm(demo_model, method):
    q = demo_model.generators(np.array([[1.0, 0.0], [0.0, 1.0]]))
    days = np.array([0.0, 120.0])
    blocks = occupancy_integrals(q, days, method)
    for g in range(2):
        for t, h in enumerate(days):
            # reference: numerical quadrature of expm(Q u) (scipy.integrate.quad_vec)
            first = quad_vec(lambda u: expm(q[g] * u), 0.0, h, epsabs=1e-10)[0]
            second = quad_vec(lambda u: (h - u) * expm(q[g] * u), 0.0, h, epsabs=1e-10)[0]
            assert np.allclose(blocks.transition[g, t], expm(q[g] * h), atol=1e-12)
            assert np.allclose(blocks.first_integral[g, t], first, atol=1e-8)
            assert np.allclose(blocks.second_integral[g, t], second, atol=1e-6)


def test_a_defective_generator_takes_the_expm_path_and_stays_right():
    """Equal rates on a progressive chain: no eigenbasis (common practice, no source: the textbook
    defective-matrix example); the auto path must fall back and still integrate correctly."""
    q = np.array([[[-0.02, 0.02, 0.0], [0.0, -0.02, 0.02], [0.0, 0.0, 0.0]]])
    blocks = occupancy_integrals(q, np.array([50.0]))
    first = quad_vec(lambda u: expm(q[0] * u), 0.0, 50.0, epsabs=1e-10)[0]
    assert np.allclose(blocks.first_integral[0, 0], first, atol=1e-8)
    assert np.allclose(blocks.transition[0, 0], expm(q[0] * 50.0), atol=1e-12)


def test_expected_counts_are_summed_per_case_forecasts(scores):
    open_cases = open_case_rows(scores)
    outlook = compute_outlook(scores, AS_OF, 12, NONE, open_cases)
    days = np.array([(d - AS_OF).days for d in outlook.dates], dtype=float)
    rows = open_cases.rows
    per_case = occupancy_over_time(scores.model, scores.p_now[rows], scores.last_covariates[rows], days)
    summed = per_case.sum(axis=0)                                     # (T, S)
    s = scores.model.n_stages
    assert np.allclose(outlook.expected[:, :s], summed, rtol=1e-9, atol=1e-9)
    assert np.allclose(outlook.expected[:, s], summed[:, scores.model.follow_up_mask].sum(axis=1), rtol=1e-9)
    assert np.all(outlook.lower_95 <= outlook.expected + 1) and np.all(outlook.expected <= outlook.upper_95 + 1)


def test_open_cases_leave_out_recorded_moves_unscorable_and_other_coordinators(scores):
    model = scores.model
    exact = model.stage_index("Moved to residential care")
    allowed = scores.timelines.allowed_stages[scores.timelines.last_index]
    moved = allowed[:, exact] & ~np.delete(allowed, exact, axis=1).any(axis=1)
    broken = scores.p_now.copy()
    broken[0] = np.nan
    damaged = replace(scores, p_now=broken)
    result = open_case_rows(damaged)
    assert result.n_left_service == int(moved[1:].sum()) and result.n_unscorable == 1
    assert 0 not in result.rows and not np.any(moved[result.rows])
    assert result.rows.size == scores.n_cases - 1 - int(moved[1:].sum())
    mine = open_case_rows(scores, "C2")
    assert set(scores.coordinators[mine.rows]) == {"C2"}


def _start_stages(p_now, rng):
    return (rng.random(p_now.shape[0])[:, None] > np.cumsum(p_now, axis=1)).sum(axis=1).clip(0, p_now.shape[1] - 1)


def test_counts_and_bands_agree_with_a_monte_carlo_simulation_of_the_caseload(demo_model, rng):
    """Each replicate draws every open case's stage now from its probabilities and runs the exact
    (Gillespie) simulator hmm.simulate.simulate_caseload to each month end."""
    scores = scored_caseload(demo_model, 200, rng)
    open_cases = open_case_rows(scores)
    outlook = compute_outlook(scores, AS_OF, 4, NONE, open_cases)
    rows = open_cases.rows
    days = np.array([(d - AS_OF).days for d in outlook.dates], dtype=float)
    replicates = 400
    p_now = np.tile(scores.p_now[rows], (replicates, 1))
    covariates = np.tile(scores.last_covariates[rows], (replicates, 1))
    start = _start_stages(p_now, rng)
    s = demo_model.n_stages
    counts = np.zeros((replicates, days.size, s))
    replicate_of = np.repeat(np.arange(replicates), rows.size)
    for stage in range(s):
        who = np.flatnonzero(start == stage)
        if not who.size:
            continue
        one_hot = replace(demo_model, initial=np.eye(s)[stage])
        sim = simulate_caseload(one_hot, [np.concatenate([[0.0], days])] * who.size, covariates[who], rng,
                                exact_entry=False)
        stages = sim.true_stages.reshape(who.size, days.size + 1)[:, 1:]
        for t in range(days.size):
            np.add.at(counts, (replicate_of[who], t, stages[:, t]), 1)
    follow_up = counts[:, :, demo_model.follow_up_mask].sum(axis=2)
    simulated = np.concatenate([counts, follow_up[:, :, None]], axis=2)
    mean, spread = simulated.mean(axis=0), simulated.std(axis=0) / np.sqrt(replicates)
    assert np.all(np.abs(mean - outlook.expected) <= 4.5 * spread + 1e-9)   # within binomial error
    inside = (simulated >= outlook.lower_95) & (simulated <= outlook.upper_95)
    assert inside.mean(axis=0).min() >= 0.92                                 # 95% bands (discrete: >= 0.95)


def _simulate_entries(model, p_now, covariates, referral_rate_per_day, arrival_covariates, days, replicates, rng):
    """Monte Carlo with hmm.simulate.simulate_path: occupancy at each day and entries between days."""
    s = model.n_stages
    follow_up = model.follow_up_mask
    occupancy = np.zeros((replicates, days.size, s + 1))
    entries = np.zeros((replicates, days.size, s + 1))
    bounds = np.concatenate([[0.0], days])

    def add(r, q, stage, start_time, counted_start):
        times, path = simulate_path(q, stage, days[-1] - start_time, rng)
        times = times + start_time
        for t in range(days.size):
            if start_time <= days[t]:
                now = path[np.searchsorted(times, days[t], side="right") - 1]
                occupancy[r, t, now] += 1
                occupancy[r, t, s] += follow_up[now]
        moves = list(zip(times[1:], path[:-1], path[1:]))
        if counted_start:
            moves.append((start_time, -1, stage))
        for when, source, target in moves:
            t = np.searchsorted(bounds, when, side="left") - 1
            entries[r, t, target] += 1
            entries[r, t, s] += follow_up[target] and (source < 0 or not follow_up[source])

    q_cases = model.generators(covariates)
    q_arrivals = model.generators(arrival_covariates)
    for r in range(replicates):
        for i, stage in enumerate(_start_stages(p_now, rng)):
            add(r, q_cases[i], stage, 0.0, False)
        for when in np.sort(rng.uniform(0.0, days[-1], rng.poisson(referral_rate_per_day * days[-1]))):
            add(r, q_arrivals[0], int(rng.choice(s, p=model.initial)), when, True)
    return occupancy, entries


def test_entries_and_referrals_agree_with_monte_carlo(demo_model, rng):
    scores = scored_caseload(demo_model, 40, rng)
    open_cases = open_case_rows(scores)
    covariate = np.array([[1.0, 0.0]])
    referrals = ReferralAssumption("fixed", 6.0, covariates=covariate, weights=np.ones(1))
    outlook = compute_outlook(scores, AS_OF, 3, referrals, open_cases)
    days = np.array([(d - AS_OF).days for d in outlook.dates], dtype=float)
    rows = open_cases.rows
    replicates = 300
    occupancy, entries = _simulate_entries(demo_model, scores.p_now[rows], scores.last_covariates[rows],
                                           6.0 / DAYS_PER_MONTH, covariate, days, replicates, rng)
    for simulated, expected in ((occupancy, outlook.expected), (entries, outlook.entries_expected)):
        mean, spread = simulated.mean(axis=0), simulated.std(axis=0) / np.sqrt(replicates)
        assert np.all(np.abs(mean - expected) <= 4.5 * spread + 0.02), (mean, expected)
    assert outlook.rows[-1] == FOLLOW_UP_ROW


def test_referral_rate_and_its_exact_interval():
    from scipy.stats import chi2

    from caseview.followup.referrals import poisson_rate_interval, referral_assumption
    from caseview.dates import to_day

    as_of = to_day(AS_OF)
    first = np.array([as_of - 400, as_of - 300, as_of - 200, as_of - 100, as_of - 10, as_of])
    covariates = np.array([[0, 0], [1, 0], [1, 0], [0, 1], [1, 0], [1, 0]], dtype=float)
    a = referral_assumption("auto", first, covariates, as_of, 2)
    months = 365 / DAYS_PER_MONTH
    assert a.n_first_contacts == 5 and a.rate_per_month == pytest.approx(5 / months)
    # Garwood (1936) exact interval, as chi-squared quantiles (scipy.stats.chi2)
    assert a.lower_95 == pytest.approx(chi2.ppf(0.025, 10) / 2 / months)
    assert a.upper_95 == pytest.approx(chi2.ppf(0.975, 12) / 2 / months)
    assert poisson_rate_interval(0, 2.0)[0] == 0.0
    assert np.allclose(a.weights, [0.2, 0.8]) and np.array_equal(a.covariates, [[0, 1], [1, 0]])  # last year only
    assert "5 first contacts" in a.describe()
    assert referral_assumption("none", first, covariates, as_of, 2).rate_per_month == 0
    assert referral_assumption("7.5", first, covariates, as_of, 2).describe().startswith("New referrals: 7.5 a month")


def test_bands_are_the_exact_poisson_binomial_quantiles_of_the_per_case_forecasts(scores):
    """Reference: each cell's count distribution by direct convolution of the per-case Bernoulli
    distributions (the textbook recursion; Hong 2013, section 2) from hmm.forecasting.occupancy_over_time."""
    from caseview.followup.poisson_binomial import EXACT_BELOW_VARIANCE

    open_cases = open_case_rows(scores)
    outlook = compute_outlook(scores, AS_OF, 6, NONE, open_cases)
    rows = open_cases.rows
    days = np.array([(d - AS_OF).days for d in outlook.dates], dtype=float)
    per_case = occupancy_over_time(scores.model, scores.p_now[rows], scores.last_covariates[rows], days)
    follow_up = per_case[:, :, scores.model.follow_up_mask].sum(axis=2, keepdims=True)
    per_case = np.concatenate([per_case, follow_up], axis=2)                       # (n, T, S+1)
    checked_exact = 0
    for t in range(days.size):
        for c in range(per_case.shape[2]):
            q = per_case[:, t, c]
            pmf = np.array([1.0])
            for p in q:
                pmf = np.convolve(pmf, [1.0 - p, p])
            cdf = np.cumsum(pmf)
            reference = [int(np.argmax(cdf >= level - 1e-12)) for level in (0.025, 0.975)]
            got = [outlook.lower_95[t, c], outlook.upper_95[t, c]]
            if (q * (1 - q)).sum() < EXACT_BELOW_VARIANCE:
                assert got == reference
                checked_exact += 1
            else:
                assert np.abs(np.array(got) - reference).max() <= 1
    assert checked_exact > 0
