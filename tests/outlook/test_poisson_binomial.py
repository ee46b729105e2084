"""The count distribution behind the outlook's bands, against the exact distribution by direct convolution."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from caseview.followup.poisson_binomial import (EXACT_BELOW_VARIANCE, CountDistributions, CountMoments, exact_pmf,
                                                mixture_quantiles, moments_from_power_sums, quantile_from_cdf,
                                                refined_normal_cdf)


def convolution_pmf(probabilities, poisson_mean=0.0, length=None):
    """Reference: the Poisson-binomial pmf by direct convolution of the Bernoulli pmfs (the textbook
    recursion, e.g. Hong 2013, Comput. Stat. Data Anal. 59, section 2), convolved with scipy.stats.poisson."""
    pmf = np.array([1.0])
    for q in probabilities:
        pmf = np.convolve(pmf, [1.0 - q, q])
    if poisson_mean:
        pmf = np.convolve(pmf, stats.poisson.pmf(np.arange(len(pmf) + 200), poisson_mean))
    if length is not None:
        pmf = np.concatenate([pmf, np.zeros(max(0, length - pmf.size))])[:length]
    return pmf


def _probabilities(rng, n, kind):
    if kind == "small":
        return rng.beta(0.3, 8.0, n)
    if kind == "mixed":
        q = rng.beta(0.4, 2.0, n)
        q[: n // 10] = rng.uniform(0.85, 1.0, n // 10)   # some nearly certain (the 1 - q series)
        return q
    return rng.uniform(0.3, 0.7, n)                       # only the direct-logarithm path


@pytest.mark.parametrize("kind,n,poisson_mean", [("small", 400, 0.0), ("mixed", 120, 3.5), ("middle", 60, 0.0),
                                                  ("small", 1, 0.0), ("mixed", 250, 12.0)])
def test_exact_pmf_equals_direct_convolution(rng, kind, n, poisson_mean):
    q = _probabilities(rng, n, kind)
    start, pmf = exact_pmf(q, poisson_mean)
    reference = convolution_pmf(q, poisson_mean, length=start + pmf.size + 1)
    assert np.abs(pmf - reference[start:start + pmf.size]).max() < 1e-12
    assert reference[:start].sum() < 1e-12 and reference[start + pmf.size:].sum() < 1e-12


def test_moments_are_the_bernoulli_and_poisson_cumulants(rng):
    q = _probabilities(rng, 300, "mixed")
    m = moments_from_power_sums(q.sum(), (q ** 2).sum(), (q ** 3).sum(), 2.5)
    k = np.arange(800)
    pmf = convolution_pmf(q, 2.5, length=k.size)
    mean = (k * pmf).sum()
    assert m.mean == pytest.approx(mean, rel=1e-10)
    assert m.variance == pytest.approx(((k - mean) ** 2 * pmf).sum(), rel=1e-9)
    assert m.third == pytest.approx(((k - mean) ** 3 * pmf).sum(), rel=1e-7, abs=1e-7)


@pytest.mark.parametrize("shape", [(0.05, 3.0), (0.3, 3.0), (1.0, 1.0), (3.0, 30.0), (0.5, 0.5)])
def test_refined_normal_quantiles_match_exact_ones_above_the_exact_threshold(rng, shape):
    """Justifies the approximation where it is used (variance >= 25): the 2.5% and 97.5% points are
    the exact ones or one count off, over many random caseloads of different shapes."""
    off_by_one = checked = 0
    for _ in range(12):
        n = int(rng.integers(800, 4000))
        q = rng.beta(*shape, n)
        m = moments_from_power_sums(q.sum(), (q ** 2).sum(), (q ** 3).sum())
        if m.variance < EXACT_BELOW_VARIANCE:
            continue
        pmf = convolution_pmf(q)
        grid = np.arange(pmf.size)
        exact = quantile_from_cdf(grid, np.cumsum(pmf), [0.025, 0.975])
        approx = quantile_from_cdf(grid, refined_normal_cdf(grid, m.mean, m.variance, m.third), [0.025, 0.975])
        assert np.abs(exact - approx).max() <= 1
        off_by_one += int(np.abs(exact - approx).max())
        checked += 1
    assert checked >= 5
    assert off_by_one <= checked // 4


def test_mixture_of_one_draw_is_that_draws_quantiles_and_mixtures_widen(rng):
    q = _probabilities(rng, 200, "small")
    start, pmf = exact_pmf(q)
    m = moments_from_power_sums(q.sum(), (q ** 2).sum(), (q ** 3).sum())
    single = CountDistributions(CountMoments(np.atleast_1d(m.mean), np.atleast_1d(m.variance),
                                             np.atleast_1d(m.third)), {0: (start, pmf)})
    grid = start + np.arange(pmf.size)
    assert np.array_equal(mixture_quantiles(single), quantile_from_cdf(grid, np.cumsum(pmf), [0.025, 0.975]))
    # two equally likely distributions centred 100 apart: the mixture's 2.5% point is the lower one's 5% point
    means, variances = np.array([400.0, 500.0]), np.array([100.0, 100.0])
    mixture = CountDistributions(CountMoments(means, variances, np.zeros(2)), {})
    low, high = mixture_quantiles(mixture)
    assert low == pytest.approx(400 - 1.645 * 10, abs=1.0)   # normal 5% point (scipy.stats.norm.ppf(0.05))
    assert high == pytest.approx(500 + 1.645 * 10, abs=1.0)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.0, 1.0), min_size=0, max_size=40), st.floats(0.0, 8.0))
def test_exact_pmf_is_a_distribution_equal_to_convolution_for_any_probabilities(probabilities, poisson_mean):
    """Property: for any probabilities (0 and 1 included) the pmf sums to one, is non-negative and
    equals direct convolution (reference as above)."""
    q = np.asarray(probabilities, dtype=float)
    start, pmf = exact_pmf(q, poisson_mean)
    assert pmf.min() >= 0.0 and pmf.sum() == pytest.approx(1.0, abs=1e-12)
    reference = convolution_pmf(q, poisson_mean, length=start + pmf.size + 1)
    assert np.abs(pmf - reference[start:start + pmf.size]).max() < 1e-10


def test_mixture_quantiles_by_bisection_equal_scanning_the_whole_grid(rng):
    """Draws spread far apart (parameter uncertainty that moves "now"), some computed exactly."""
    for _ in range(30):
        n_draws = int(rng.integers(1, 60))
        means = rng.normal(3000.0, rng.uniform(1.0, 800.0), n_draws).clip(30.0)
        variances = np.maximum(25.0, rng.uniform(0.3, 0.9, n_draws) * means)   # normal draws: variance >= 25
        thirds = variances * rng.uniform(-0.5, 1.0, n_draws)   # skewness at most 1 / sd (Bernoulli sums)
        exact = {}
        for d in rng.choice(n_draws, size=min(3, n_draws), replace=False).tolist():
            q = _probabilities(rng, 200, "small")
            exact[d] = exact_pmf(q, float(rng.uniform(0, 5)))
        cell = CountDistributions(CountMoments(means, variances, thirds), exact)
        grid = cell.grid()
        scanned = quantile_from_cdf(grid, cell.cdf(grid).mean(axis=0), [0.025, 0.975])
        assert np.array_equal(mixture_quantiles(cell), scanned)
