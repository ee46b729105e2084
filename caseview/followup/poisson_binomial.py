"""How many of a caseload will be in a stage: the distribution of a sum of independent yes/no outcomes.

Given the model's parameters, case ``i`` is in stage ``s`` on a future day with probability ``q_i``,
independently of the other cases, so the number in the stage is Poisson-binomial; new referrals add
an independent Poisson count (a thinned Poisson process). This module gives that count's
distribution function in one of two ways:

* **exact** (:func:`exact_pmf`), used when the count's variance is below
  :data:`EXACT_BELOW_VARIANCE`: the characteristic function ``prod_i (1 - q_i + q_i z)`` is
  evaluated on ``L`` roots of unity and inverted with one FFT (the DFT-CF method, Hong 2013,
  *Comput. Stat. Data Anal.* 59, 41-51). Cases with ``q <= 0.1`` (and ``q >= 0.9``, through
  ``1 - q``) enter through the power sums ``sum q**m`` (the series of ``log(1 + q (z - 1))``), so
  the cost is ``n`` times a few dozen, not ``n`` times ``L``. ``L`` (64 to 128 counts below
  variance 25) comes from Bernstein's inequality, so the aliasing error is below about 1e-15.
* **refined normal approximation** (:func:`refined_normal_cdf`) otherwise: the normal
  distribution with a continuity and skewness correction (Volkova 1996, as given in Hong 2013,
  eq. 8). With a standard deviation of 5 or more its 2.5% and 97.5% points match the exact ones
  to within one count; ``tests/outlook/test_poisson_binomial.py`` checks that against the exact
  distribution by direct convolution.

Quantiles follow one convention: the ``level`` quantile is the smallest count ``k`` with
``P(count <= k) >= level``. A mixture over parameter draws averages the draws' distribution
functions on a common grid of counts (:func:`mixture_quantiles`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr

#: Below this variance the count's distribution is computed exactly (standard deviation 5).
EXACT_BELOW_VARIANCE = 25.0
SERIES_TERMS = 30      # |q (z - 1)| <= 0.2, so the series error is below 0.2**30 / 30 per case
SMALL = 0.1


@dataclass(frozen=True)
class CountMoments:
    """Mean, variance and third central moment of counts, each ndarray of the same shape."""

    mean: np.ndarray
    variance: np.ndarray
    third: np.ndarray


def moments_from_power_sums(s1, s2, s3, poisson_mean=0.0) -> CountMoments:
    """Moments of a Poisson-binomial count plus an independent Poisson count.

    Parameters
    ----------
    s1, s2, s3 : ndarray
        ``sum q``, ``sum q**2``, ``sum q**3`` over the cases.
    poisson_mean : float or ndarray
        Mean of the added Poisson count (its variance and third central moment equal it).
    """
    s1, s2, s3 = (np.asarray(v, dtype=float) for v in (s1, s2, s3))
    m = np.asarray(poisson_mean, dtype=float)
    # sum q(1-q) and sum q(1-q)(1-2q): the cumulants of independent Bernoulli counts
    variance = np.maximum(s1 - s2, 0.0) + m
    third = s1 - 3.0 * s2 + 2.0 * s3 + m
    return CountMoments(s1 + m, variance, third)


def refined_normal_cdf(k, mean, variance, third) -> np.ndarray:
    """P(count <= k) by the refined normal approximation (broadcasts over all arguments).

    ``G(x) = Phi(x) + gamma (1 - x**2) phi(x) / 6`` at ``x = (k + 0.5 - mean) / sd`` with the
    skewness ``gamma = third / sd**3`` (Volkova 1996; Hong 2013, eq. 8), clipped to [0, 1].
    """
    k = np.asarray(k, dtype=float)
    sd = np.sqrt(np.maximum(np.asarray(variance, dtype=float), 1e-300))
    x = (k + 0.5 - mean) / sd
    gamma = np.asarray(third, dtype=float) / sd ** 3
    density = np.exp(-0.5 * x * x) / np.sqrt(2.0 * np.pi)
    return np.clip(ndtr(x) + gamma * (1.0 - x * x) * density / 6.0, 0.0, 1.0)


def _series_log_cf(probabilities: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``sum_i log(1 + q_i w)`` for small ``q_i`` through power sums, for every ``w``."""
    if probabilities.size == 0:
        return np.zeros_like(w)
    powers = probabilities.copy()
    total = np.zeros_like(w)
    w_power = np.ones_like(w)
    for m in range(1, SERIES_TERMS + 1):
        w_power = w_power * w
        total += ((-1) ** (m + 1) / m) * powers.sum() * w_power
        powers *= probabilities
    return total


def window_length(variance: float) -> int:
    """Counts the exact distribution is computed over: a power of two at least ``2 t``, where a count
    farther than ``t`` from its mean has probability below 1e-15 by Bernstein's inequality
    (``P(|X - mean| >= t) <= 2 exp(-t**2 / (2 (variance + t / 3)))`` for sums of independent
    variables in [0, 1]; Poisson counts are limits of such sums)."""
    t = (70.0 / 3.0 + np.sqrt((70.0 / 3.0) ** 2 + 280.0 * max(variance, 0.0))) / 2.0
    return int(max(64, 2 ** int(np.ceil(np.log2(2.0 * t + 2.0)))))


def exact_pmf(probabilities, poisson_mean: float = 0.0) -> tuple:
    """Exact distribution of a Poisson-binomial count plus an independent Poisson count.

    Parameters
    ----------
    probabilities : ndarray, shape (n,)
        Each case's probability.
    poisson_mean : float
        Mean of the added Poisson count (0 for none).

    Returns
    -------
    start : int
        The first count of the window.
    pmf : ndarray, shape (L,)
        ``pmf[j] = P(count = start + j)``, ``L = window_length(variance)``; the mass outside the
        window is below about 1e-15.
    """
    q = np.clip(np.asarray(probabilities, dtype=float).reshape(-1), 0.0, 1.0)
    window = window_length(float((q * (1.0 - q)).sum()) + float(poisson_mean))
    low, high = q[q <= SMALL], q[q >= 1.0 - SMALL]
    middle = q[(q > SMALL) & (q < 1.0 - SMALL)]
    angle = 2.0 * np.pi * np.arange(window) / window
    z = np.exp(1j * angle)
    # log(1 - q + q z) = log(1 + q (z - 1)); for q near 1: log z + log(1 + (1 - q)(1/z - 1))
    log_cf = _series_log_cf(low, z - 1.0) + _series_log_cf(1.0 - high, np.conj(z) - 1.0)
    log_cf += 1j * angle * high.size
    log_cf += float(poisson_mean) * (z - 1.0)
    cf = np.exp(log_cf)
    if middle.size:   # few cases (each adds at least 0.09 to the variance): a plain product
        cf = cf * np.prod(1.0 - middle[:, None] + middle[:, None] * z[None, :], axis=0)
    wrapped = np.fft.fft(cf).real / window      # P(count = k) at index k mod window
    mean = q.sum() + float(poisson_mean)
    start = max(0, int(np.floor(mean)) - window // 2)
    pmf = np.clip(wrapped[(start + np.arange(window)) % window], 0.0, None)
    return start, pmf / pmf.sum()


def quantile_from_cdf(grid: np.ndarray, cdf: np.ndarray, levels) -> np.ndarray:
    """Smallest ``grid`` value whose ``cdf`` reaches each level; ``cdf`` along the last axis."""
    cdf = np.maximum.accumulate(cdf, axis=-1)
    out = []
    for level in np.atleast_1d(levels):
        index = np.argmax(cdf >= level - 1e-12, axis=-1)
        out.append(grid[index])
    return np.stack(out, axis=-1)


@dataclass(frozen=True)
class CountDistributions:
    """The conditional count distribution of each parameter draw for one (date, stage) cell.

    Attributes
    ----------
    moments : CountMoments
        Arrays of shape (n_draws,).
    exact : dict[int, tuple]
        Draw index -> ``(start, pmf)`` for the draws computed exactly.
    """

    moments: CountMoments
    exact: dict

    def grid(self) -> np.ndarray:
        sd = np.sqrt(self.moments.variance)
        low = np.floor(np.min(self.moments.mean - 10.0 * sd - 2.0))
        high = np.ceil(np.max(self.moments.mean + 10.0 * sd + 2.0))
        for start, pmf in self.exact.values():
            low, high = min(low, start), max(high, start + pmf.size)
        return np.arange(max(0.0, low), high + 1.0)

    def cdf(self, grid: np.ndarray) -> np.ndarray:
        """P(count <= k) for every draw (rows) and grid count (columns), shape (n_draws, n_grid)."""
        m = self.moments
        values = refined_normal_cdf(grid[None, :], m.mean[:, None], m.variance[:, None], m.third[:, None])
        for d, (start, pmf) in self.exact.items():
            cumulative = np.cumsum(pmf)
            position = np.clip(grid.astype(np.int64) - start, -1, pmf.size - 1)
            values[d] = np.where(position < 0, 0.0, cumulative[np.maximum(position, 0)])
        return values


def mixture_quantiles(distributions: CountDistributions, levels=(0.025, 0.975)) -> np.ndarray:
    """Quantiles of the equal-weight mixture of the draws' count distributions, shape (len(levels),).

    The smallest count of :meth:`CountDistributions.grid` whose mixture CDF reaches each level,
    found by bisection (a few CDF evaluations instead of the whole grid: with parameter draws that
    move "now" the grid spans thousands of counts for each of hundreds of draws). The mixture CDF
    is non-decreasing: exact draws are cumulative sums, and the refined normal approximation is
    only used at variance >= 25 (:data:`EXACT_BELOW_VARIANCE`), where its skewness is at most
    ``1 / sd <= 0.2``, so it only decreases below 0.0002 or above 0.9998; so this is the count that
    scanning the grid (:func:`quantile_from_cdf`, tested equal) gives.
    """
    grid = distributions.grid()

    def mixture_cdf(i: int) -> float:
        return float(distributions.cdf(grid[i:i + 1]).mean())

    top = mixture_cdf(grid.size - 1)
    out = []
    for level in np.atleast_1d(levels):
        target = level - 1e-12
        if top < target:
            out.append(grid[0])   # as quantile_from_cdf: no count reaches the level
            continue
        below, reached = -1, grid.size - 1
        while reached - below > 1:
            middle = (below + reached) // 2
            if mixture_cdf(middle) >= target:
                reached = middle
            else:
                below = middle
        out.append(grid[reached])
    return np.array(out)
