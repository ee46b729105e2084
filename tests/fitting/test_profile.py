"""Profile-likelihood intervals: against a closed form, against a brute-force profile, flags and warnings."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.optimize
import scipy.stats

from fitting_helpers import simulate, three_stage_model
from hmm import Timelines
from hmm.fitting import fit_model, parameter_spec
from hmm.fitting.intervals import LARGE_EFFECT, PROFILE_BELOW_CASES, choose_interval_kind, effect_warnings
from hmm.fitting.likelihood import evaluate, prepare
from hmm.model import Channel, StageModel, Transition

GAP = 30.0
CHI2_95 = scipy.stats.chi2.ppf(0.95, 1)


def _observed_stage_caseload(stage_paths, n_stages) -> Timelines:
    """Every stage recorded at every contact, contacts every GAP days; one channel, never observed."""
    counts = [len(p) for p in stage_paths]
    n = sum(counts)
    allowed = np.zeros((n, n_stages), dtype=bool)
    allowed[np.arange(n), np.concatenate(stage_paths)] = True
    return Timelines(np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
                     np.concatenate([GAP * np.arange(c) for c in counts]).astype(float),
                     np.full((n, 1), -1, dtype=np.int16), allowed, np.zeros((n, 0)))


def _silent_channel(n_stages):
    return Channel("unused", ("a", "b"), np.full((n_stages, 2), 0.5), fixed_stages=frozenset(range(n_stages)))


def test_profile_interval_of_a_rate_and_its_mean_time_matches_the_binomial_likelihood_interval():
    # Two stages A -> B (B absorbing), the stage recorded at contacts every GAP days: each step out of A
    # stays with probability p = exp(-q GAP), so the likelihood is binomial in p with `stay` successes and
    # `move` failures. The 95% likelihood interval of p is {p : 2 (l(p_hat) - l(p)) <= chi2_1(0.95)}
    # (Pawitan 2001, In All Likelihood, section 2.6, binomial example); q = -log(p) / GAP and the mean
    # time in A, 1/q, are one-to-one in p, so their profile intervals are the images of that interval.
    model = StageModel(stages=("A", "B"), initial=np.array([1.0, 0.0]), transitions=(Transition(0, 1, 0.01),),
                       channels=(_silent_channel(2),), initial_fixed=True, name="two stages")
    paths = [[0] * k + [1] for k in (1, 2, 2, 3, 4, 4, 5, 6, 7, 9)] + [[0] * 8] * 3
    stay = sum(sum(1 for a, b in zip(p, p[1:]) if a == b == 0) for p in paths)
    move = sum(1 for p in paths if 1 in p)
    result = fit_model(model, _observed_stage_caseload([np.array(p) for p in paths], 2), starts=1,
                       intervals="profile")

    def loglik(p):
        return stay * np.log(p) + move * np.log1p(-p)

    p_hat = stay / (stay + move)
    drop = lambda p: 2 * (loglik(p_hat) - loglik(p)) - CHI2_95  # noqa: E731
    p_low, p_high = scipy.optimize.brentq(drop, 1e-9, p_hat), scipy.optimize.brentq(drop, p_hat, 1 - 1e-12)
    rate = next(e for e in result.parameters if e.kind == "rate")
    assert rate.interval_kind == "profile" and not rate.weakly_identified
    assert rate.estimate == pytest.approx(-np.log(p_hat) / GAP, rel=1e-5)
    assert rate.lower == pytest.approx(-np.log(p_high) / GAP, rel=2e-3)
    assert rate.upper == pytest.approx(-np.log(p_low) / GAP, rel=2e-3)
    stay_in_a = result.mean_time_in_stage[0]
    assert stay_in_a.stage == "A" and stay_in_a.interval_kind == "profile"
    assert stay_in_a.lower == pytest.approx(GAP / -np.log(p_low), rel=2e-3)
    assert stay_in_a.upper == pytest.approx(GAP / -np.log(p_high), rel=2e-3)


def _competing_model():
    """A -> B and A -> C (both absorbing); stages seen only through a noisy channel with fixed rows."""
    probabilities = np.array([[0.8, 0.1, 0.1], [0.15, 0.7, 0.15], [0.1, 0.2, 0.7]])
    return StageModel(stages=("A", "B", "C"), initial=np.array([1.0, 0.0, 0.0]),
                      transitions=(Transition(0, 1, 0.006), Transition(0, 2, 0.003)),
                      channels=(Channel("sign", ("x", "y", "z"), probabilities, fixed_stages=frozenset({0, 1, 2})),),
                      initial_fixed=True, name="competing exits")


def test_profile_of_mean_time_matches_a_brute_force_profile_on_a_tiny_model():
    # The mean time in A, 1 / (q_AB + q_AC), depends on both rates. Brute force: write the rates as
    # (total, share), maximise the log-likelihood over the share on a fine grid refined by a bounded scalar
    # search for each total, and find where the profile falls chi2_1(0.95) / 2 below its maximum.
    # The fit finds the same ends by constrained optimisation (hmm.fitting.profile).
    from hmm.simulate import simulate_caseload

    model = _competing_model()
    rng = np.random.default_rng(20261203)
    times = [np.cumsum(np.concatenate([[0.0], rng.integers(10, 60, size=7)])).astype(float) for _ in range(60)]
    timelines = simulate_caseload(model, times, np.zeros((60, 0)), rng).timelines
    result = fit_model(model, timelines, starts=1, intervals="profile")
    spec = parameter_spec(model)
    plan = prepare(model, timelines, spec)

    def loglik(log_total, share):
        return evaluate(plan, np.array([log_total + np.log(share), log_total + np.log1p(-share)]),
                        gradient=False).log_likelihood

    def profile(log_total):
        shares = np.linspace(0.02, 0.98, 25)
        best = shares[np.argmax([loglik(log_total, s) for s in shares])]
        found = scipy.optimize.minimize_scalar(lambda s: -loglik(log_total, s), bounds=(max(best - 0.04, 1e-4),
                                               min(best + 0.04, 1 - 1e-4)), method="bounded",
                                               options={"xatol": 1e-6})
        return -found.fun

    rates = [e.estimate for e in result.parameters if e.kind == "rate"]
    log_total_hat = np.log(sum(rates))
    top = profile(log_total_hat)
    drop = lambda t: 2 * (top - profile(t)) - CHI2_95  # noqa: E731
    low = scipy.optimize.brentq(drop, log_total_hat - 3, log_total_hat, xtol=1e-5)
    high = scipy.optimize.brentq(drop, log_total_hat, log_total_hat + 3, xtol=1e-5)
    stay = result.mean_time_in_stage[0]
    assert stay.interval_kind == "profile"
    assert stay.lower == pytest.approx(np.exp(-high), rel=2e-3)
    assert stay.upper == pytest.approx(np.exp(-low), rel=2e-3)
    assert stay.lower < stay.estimate < stay.upper


def test_auto_chooses_profile_below_5000_cases_or_when_ill_conditioned():
    good = np.diag([10.0, 20.0])
    assert choose_interval_kind("auto", 400, good)[0] == "profile"
    assert choose_interval_kind("auto", PROFILE_BELOW_CASES, good)[0] == "wald"
    assert choose_interval_kind("auto", 100_000, np.diag([1e10, 1e-3]))[0] == "profile"
    assert choose_interval_kind("wald", 10, good) == ("wald", "as asked")
    with pytest.raises(ValueError, match="expected auto, profile, wald"):
        choose_interval_kind("bayes", 10, good)


def test_an_effect_the_data_cannot_bound_is_flagged_and_warned():
    # Separation: cases with alone = 1 never move Well -> Unwell, so the log hazard ratio runs to its bound.
    truth = three_stage_model()
    rng = np.random.default_rng(7)
    t = truth.transitions
    # the covariate is 0/1: declaring it lets the model hold an effect of -40 (hmm.model.rate_limit_problem)
    truth = dataclasses.replace(truth, covariate_ranges=((0.0, 1.0),))
    sim = simulate(dataclasses.replace(truth, transitions=(dataclasses.replace(t[0], effects={"alone": -40.0}),
                                                           t[1], t[2])), rng, n_cases=80, n_contacts=5)
    result = fit_model(truth, sim.timelines, starts=1, intervals="profile")
    effect = next(e for e in result.parameters if e.kind == "log_hazard_ratio")
    # the likelihood keeps rising towards -infinity; where the optimiser stops does not matter, the flags do
    assert effect.estimate < -1.0
    assert effect.weakly_identified and not effect.interval_is_informative and "no lower bound" in effect.note
    assert any("effect of alone on Well -> Unwell" in w and ("weakly identified" in w or "beyond" in w
                                                              or "limit" in w) for w in result.warnings)
    hazard = result.hazard_ratios[0]
    assert hazard.weakly_identified and "weakly identified" in hazard.note
    table = result.format_table()
    assert "profile-likelihood intervals" in table and "weakly identified" in table


def test_large_log_hazard_ratios_are_warned_with_the_threshold():
    model = three_stage_model()
    spec = parameter_spec(model)
    theta = spec.to_vector(model)
    slot = spec.names.index("effect of alone on Well -> Unwell")
    for value, words in ((LARGE_EFFECT + 0.5, "beyond +/-5"), (-19.5, "optimiser's limit"), (1.0, None)):
        theta[slot] = value
        warnings = effect_warnings(spec, theta)
        assert (words is None and not warnings) or any(words in w for w in warnings), (value, warnings)


def test_profile_and_wald_agree_when_the_likelihood_is_nearly_quadratic():
    # With many cases the log-likelihood is close to quadratic and the two intervals nearly coincide
    # (Pawitan 2001, section 9.4: the Wald interval is the quadratic approximation of the profile).
    model = three_stage_model(with_covariate=False)
    sim = simulate(model, np.random.default_rng(11), n_cases=600, n_contacts=10)
    profile = fit_model(model, sim.timelines, starts=1, intervals="profile")
    wald = fit_model(model, sim.timelines, starts=1, intervals="wald")
    for p, w in zip(profile.parameters, wald.parameters):
        if p.kind == "rate" and not p.fixed:
            assert p.interval_kind == "profile" and w.interval_kind == "wald"
            width = np.log(w.upper) - np.log(w.lower)
            assert abs(np.log(p.lower) - np.log(w.lower)) < 0.15 * width
            assert abs(np.log(p.upper) - np.log(w.upper)) < 0.15 * width


def _exact_entry_caseload(entries, censored, step=GAP):
    """Two stages A -> B with B entered exactly: a case is seen in A every ``step`` days from day 0 and either
    recorded entering B on day ``t`` (``entries``) or last seen in A on day ``t`` (``censored``)."""
    rows = []   # (case, day, stage)
    for case, (t, moved) in enumerate([(t, True) for t in entries] + [(t, False) for t in censored]):
        days = list(np.arange(0.0, t, step)) + [float(t)]
        if not moved and len(days) > 1 and days[-1] == days[-2]:
            days.pop()
        rows += [(case, d, 0) for d in days[:-1]] + [(case, days[-1], 1 if moved else 0)]
    counts = np.bincount([r[0] for r in rows])
    allowed = np.zeros((len(rows), 2), dtype=bool)
    allowed[np.arange(len(rows)), [r[2] for r in rows]] = True
    return Timelines(np.concatenate([[0], np.cumsum(counts)]).astype(np.int64),
                     np.array([r[1] for r in rows], dtype=float), np.full((len(rows), 1), -1, dtype=np.int16),
                     allowed, np.zeros((len(rows), 0)))


def _exact_entry_model():
    return StageModel(stages=("A", "B"), initial=np.array([1.0, 0.0]), transitions=(Transition(0, 1, 0.01),),
                      channels=(_silent_channel(2),), initial_fixed=True, exact_entry_stages=("B",),
                      name="two stages, exact entry")


def test_profile_interval_of_a_rate_matches_the_closed_form_exponential_likelihood():
    # Stage A is seen at every contact and the move to B is dated exactly, so the time in A is an exponential
    # sojourn observed with right censoring: l(q) = d log q - q T, d moves and T days at risk in A (Cox & Oakes
    # 1984, Analysis of Survival Data, section 3.2, exponential distribution with censored data; the Poisson
    # form of the same likelihood). q_hat = d / T, and the 95% likelihood interval is {q : 2 (l(q_hat) - l(q))
    # <= chi2_1(0.95)} (Pawitan 2001, In All Likelihood, section 2.6), found here with scipy.optimize.brentq.
    entries = [12.0, 40.0, 55.0, 73.0, 90.0, 130.0, 150.0, 200.0]
    censored = [180.0, 240.0, 240.0]
    d, T = len(entries), sum(entries) + sum(censored)
    result = fit_model(_exact_entry_model(), _exact_entry_caseload(entries, censored), starts=1, intervals="profile")
    loglik = lambda q: d * np.log(q) - q * T  # noqa: E731
    q_hat = d / T
    drop = lambda q: 2 * (loglik(q_hat) - loglik(q)) - CHI2_95  # noqa: E731
    low, high = scipy.optimize.brentq(drop, q_hat * 1e-6, q_hat), scipy.optimize.brentq(drop, q_hat, q_hat * 1e3)
    rate = next(e for e in result.parameters if e.kind == "rate")
    assert rate.estimate == pytest.approx(q_hat, rel=1e-5)
    assert rate.interval_method == "profile" and not rate.weakly_identified and not rate.profile_failed
    assert rate.lower == pytest.approx(low, rel=2e-3) and rate.upper == pytest.approx(high, rel=2e-3)
    stay = result.mean_time_in_stage[0]      # 1 / q: the image of the same interval
    assert stay.interval_method == "profile"
    assert stay.lower == pytest.approx(1 / high, rel=2e-3) and stay.upper == pytest.approx(1 / low, rel=2e-3)
    # Wald on the log scale is symmetric about log q_hat; the profile interval is not (Pawitan 2001, 2.6)
    wald = next(e for e in fit_model(_exact_entry_model(), _exact_entry_caseload(entries, censored), starts=1,
                                     intervals="wald").parameters if e.kind == "rate")
    assert wald.interval_method == "wald" and abs(np.log(wald.lower / low)) > 0.01


def test_a_rate_with_no_moves_gets_a_one_sided_interval_that_says_the_bound_was_reached():
    # No case leaves A: l(q) = -q T is largest at q = 0, so the likelihood interval is [0, chi2_1(0.95) / (2 T)]
    # (Cox & Oakes 1984, section 3.2 with d = 0; Pawitan 2001, section 2.6). The lower end is the bound q = 0,
    # reached with the deviance still under the threshold: one-sided, and said so.
    censored = [150.0, 200.0, 240.0, 300.0, 90.0]
    T = sum(censored)
    result = fit_model(_exact_entry_model(), _exact_entry_caseload([], censored), starts=1, intervals="profile")
    rate = next(e for e in result.parameters if e.kind == "rate")
    assert rate.interval_kind == "profile" and rate.bound_reached == "lower"
    assert rate.interval_method == "profile, bound reached (lower)"
    assert rate.lower == 0.0 and rate.at_bound and "the data allow 0" in rate.note
    assert rate.upper == pytest.approx(CHI2_95 / (2 * T), rel=5e-3)
    assert not rate.weakly_identified and rate.interval_is_informative
    stay = result.mean_time_in_stage[0]      # 1 / q: at least 1 / upper, with no upper bound
    assert stay.bound_reached == "upper" and stay.weakly_identified and "no upper bound" in stay.note
    assert stay.lower == pytest.approx(2 * T / CHI2_95, rel=5e-3)
    assert "no upper bound] profile, bound reached (upper)" in result.format_table()
    stored = type(result.to_summary()).from_dict(result.to_summary().to_dict())
    assert next(e for e in stored.parameters if e.kind == "rate").interval_method == "profile, bound reached (lower)"


def test_a_failed_profile_search_shows_the_wald_interval_and_says_so(monkeypatch):
    # Starve the search (two likelihood evaluations per end): every profile fails, and each estimate must then
    # carry its Wald interval labelled as a fallback with the reason, in the result, the table and stored JSON.
    import hmm.fitting.profile as profile_module
    from hmm.fitting.summary import FitSummary

    monkeypatch.setattr(profile_module, "MAX_EVALUATIONS_PER_END", 2)
    model = three_stage_model(with_covariate=False)
    sim = simulate(model, np.random.default_rng(5), n_cases=120, n_contacts=6)
    result = fit_model(model, sim.timelines, starts=1, intervals="profile")
    rates = [e for e in result.parameters if e.kind == "rate" and not e.fixed]
    assert rates and all(e.interval_kind == "wald" and "used 2 likelihood evaluations" in e.profile_failed
                         for e in rates)
    assert all(e.interval_method.startswith("wald (profile search failed: ") for e in rates)
    assert all("profile search failed: Wald interval shown" in e.note for e in rates)
    stored = FitSummary.from_dict(result.to_summary().to_dict())
    assert set(e.name for e in rates) <= set(stored.profile_fallbacks)
    table = stored.format_table()
    assert "profile failed" in table and "wald (profile search failed: " in table
    assert "caveat: " in table


def test_profile_interval_of_an_observation_probability_matches_the_binomial_likelihood_interval():
    # The stage is recorded at every contact, so a channel's recordings in stage A are a multinomial sample;
    # maximising over how the other categories share the rest, the profile of P(k | A) is the binomial
    # log-likelihood n_k log p + (n - n_k) log(1 - p) (Pawitan 2001, In All Likelihood, section 2.6 and the
    # multinomial profile of section 3.4). P(k | A) is a softmax of two logits: the non-coordinate path.
    counts = {0: 31, 1: 12, 2: 3}                       # recordings of each category while in A
    n_a = sum(counts.values())
    codes = np.concatenate([np.full(c, k) for k, c in counts.items()]).astype(np.int16)
    n = codes.size
    timelines = Timelines(np.arange(n + 1, dtype=np.int64), np.zeros(n), codes[:, None],
                          np.tile(np.array([True, False]), (n, 1)), np.zeros((n, 0)))
    channel = Channel("sign", ("x", "y", "z"), np.array([[0.6, 0.3, 0.1], [0.2, 0.3, 0.5]]),
                      fixed_stages=frozenset({1}))
    model = StageModel(stages=("A", "B"), initial=np.array([1.0, 0.0]), transitions=(Transition(0, 1, 0.01),),
                       channels=(channel,), initial_fixed=True, name="recorded stages")
    model = dataclasses.replace(model, transitions=(dataclasses.replace(model.transitions[0], fixed_rate=True),))
    result = fit_model(model, timelines, starts=1, intervals="profile")
    for k, count in counts.items():
        loglik = lambda p, _c=count: _c * np.log(p) + (n_a - _c) * np.log1p(-p)  # noqa: E731
        p_hat = count / n_a
        drop = lambda p, _l=loglik, _p=p_hat: 2 * (_l(_p) - _l(p)) - CHI2_95  # noqa: E731
        low, high = scipy.optimize.brentq(drop, 1e-9, p_hat), scipy.optimize.brentq(drop, p_hat, 1 - 1e-9)
        estimate = next(e for e in result.parameters if e.name == f"sign: P({'xyz'[k]} | A)")
        assert estimate.interval_method == "profile", estimate
        assert estimate.estimate == pytest.approx(p_hat, rel=1e-4)
        assert estimate.lower == pytest.approx(low, rel=5e-3) and estimate.upper == pytest.approx(high, rel=5e-3)
