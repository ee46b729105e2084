"""Bootstrap calibration of the 95% intervals' width for caseloads too small for chi-squared theory.

Why: on the demo model's structure with 1,000 cases, 95% Wald and profile-likelihood intervals
covered the true values only about 88% of the time (tests/fitting/test_coverage_demo.py). The
misses cluster in caseloads whose fit settles on a somewhat different account of the hidden stages
(for example faster switching between two neighbouring stages with shifted check-result
probabilities); there, many quantities at once sit a few standard errors from the truth, while the
fit's own curvature looks ordinary. The likelihood-ratio statistic of one quantity is then far from
its chi-squared(1) reference, and neither interval kind can know that from the fit alone.

What: a parametric bootstrap of the studentised estimates (the bootstrap-t idea: Efron & Tibshirani
1993, *An Introduction to the Bootstrap*, chapter 12.5; calibration of a nominal level: Hall 1992,
*The Bootstrap and Edgeworth Expansion*, section 3.11). ``B`` caseloads are simulated from the
fitted model with the observed contact schedule, covariates, recording pattern and known stages
(the fit check's simulation rule, :func:`hmm.fitting.goodness._replicate`), each is refitted from
the fitted values, and every reported quantity gives a studentised difference on its link scale
(log for rates, hazard ratios and mean times; logit for probabilities)::

    z*_bj = (g_j(theta*_b) - g_j(theta_hat)) / se*_bj

The calibrated threshold ``c`` is the 95th percentile of ``z*^2`` pooled over the draws and the
quantities that are not weakly identified, never below the chi-squared(1) point 3.841: under the
fitted model, intervals of half-width ``sqrt(c)`` standard errors cover 95% of the time on average
over the quantities. Pooling (one threshold for every quantity, not one per quantity) is our
choice so that a few dozen refits suffice; it widens well-behaved quantities a little more than
needed and unstable ones a little less. Wald intervals then use ``sqrt(c)`` instead of 1.96 and
profile intervals end where the deviance reaches ``c`` instead of 3.841.

When the fit's account of the stages is unstable, refits under the fitted model shift as well, the
pooled ``z*`` has heavy tails and ``c`` grows: the intervals widen and the fit summary says by how
much. A calibration is only as good as the fitted model is as a stand-in for the truth; with
informative contact timing the unscheduled contacts are simulated from the fitted rates.
"""

from __future__ import annotations

import math
import os
import threading
from concurrent.futures import FIRST_EXCEPTION, ThreadPoolExecutor, wait
from dataclasses import dataclass

import numpy as np

from ..model import StageModel
from ..timelines import Timelines
from .parameters import ParameterSpec
from .profile import PROFILE_THRESHOLD

__all__ = ["IntervalCalibration", "calibrate_intervals", "calibration_warnings", "DEFAULT_CALIBRATION_DRAWS",
           "CALIBRATE_BELOW_CASES", "WIDE_CALIBRATION"]

#: Refits of simulated caseloads for the calibration by default (the application's choice below
#: :data:`CALIBRATE_BELOW_CASES` cases); 40 draws x 60-70 quantities pool about 2,500 values, enough
#: for a 95th percentile within a few per cent.
DEFAULT_CALIBRATION_DRAWS = 40
#: The application calibrates by default below this many cases (the same size below which profile
#: intervals are the default, :data:`hmm.fitting.intervals.PROFILE_BELOW_CASES`).
CALIBRATE_BELOW_CASES = 5000
#: Width multiplier above which the fit summary warns that the caseload does not settle the model.
WIDE_CALIBRATION = 1.5


@dataclass(frozen=True)
class IntervalCalibration:
    """The result of :func:`calibrate_intervals`.

    Attributes
    ----------
    draws : int
        Simulated caseloads asked for.
    used : int
        Refits that converged with standard errors (the others are left out).
    threshold : float
        Calibrated squared half-width ``c`` (>= 3.841, the chi-squared(1) 95% point).
    multiplier : float
        ``sqrt(c / 3.841)``: how much wider than uncalibrated intervals the intervals are.
    exceed_fraction : float
        Fraction of the pooled ``|z*|`` beyond 1.96: how often uncalibrated intervals would have
        missed under the fitted model (0.05 when chi-squared theory holds).
    pooled : int
        Number of pooled studentised differences.
    """

    draws: int
    used: int
    threshold: float
    multiplier: float
    exceed_fraction: float
    pooled: int

    @property
    def z(self) -> float:
        """Half-width of a calibrated interval in standard errors (1.96 uncalibrated)."""
        return math.sqrt(self.threshold)

    def describe(self) -> str:
        """One line for fit summaries."""
        return (f"widths calibrated by {self.used} refits of caseloads simulated from the fitted model: "
                f"{self.exceed_fraction:.0%} of the refits' estimates fell outside their own uncalibrated 95% "
                f"intervals (5% expected), so every interval is {self.multiplier:.2f} times as wide "
                f"({self.z:.2f} standard errors instead of 1.96)")

    def to_dict(self) -> dict:
        return {"draws": self.draws, "used": self.used, "threshold": self.threshold, "multiplier": self.multiplier,
                "exceed_fraction": self.exceed_fraction, "pooled": self.pooled}

    @classmethod
    def from_dict(cls, data: dict) -> "IntervalCalibration":
        return cls(int(data["draws"]), int(data["used"]), float(data["threshold"]), float(data["multiplier"]),
                   float(data["exceed_fraction"]), int(data["pooled"]))


def calibrate_intervals(fitted: StageModel, timelines: Timelines, spec: ParameterSpec, theta_hat: np.ndarray,
                        covariance: np.ndarray, draws: int, rng: np.random.Generator, *, threads: int | None = None,
                        callback=None) -> IntervalCalibration:
    """Calibrated 95% threshold from ``draws`` parametric-bootstrap refits (module docstring).

    Parameters
    ----------
    fitted : StageModel
        The fitted model: simulation truth and start of every refit.
    timelines : Timelines
        The observed caseload (its schedule, covariates, recording pattern and known stages are kept).
    spec : ParameterSpec
        Of ``fitted``.
    theta_hat : ndarray, shape (p,)
        The estimate (unconstrained scale).
    covariance : ndarray, shape (p, p)
        Its covariance (inverse observed information).
    draws : int
        Simulated caseloads (at least 1).
    rng : numpy.random.Generator
        One seed per draw is taken from it up front, so the result does not depend on ``threads``.
    threads : int, optional
        Refits run at once (default: the machine's cores, at most 4).
    callback : callable(fraction), optional

    Returns
    -------
    IntervalCalibration
    """
    from .goodness import _replicate, _schedule
    from .intervals import WEAK_STANDARD_ERROR, link_scale_standard_errors

    if draws < 1:
        raise ValueError(f"calibration draws: expected at least 1, got {draws}")
    linked_hat, se_hat = link_scale_standard_errors(spec, theta_hat, covariance)
    usable_hat = np.isfinite(linked_hat) & np.isfinite(se_hat) & (se_hat <= WEAK_STANDARD_ERROR)
    schedule = _schedule(fitted, timelines)
    seeds = rng.integers(0, 2 ** 63 - 1, size=draws)
    done = [0]
    lock = threading.Lock()
    cancelled = threading.Event()     # the callback raised: start no further refit

    def one(seed) -> np.ndarray | None:
        from .optimise import fit_model

        if cancelled.is_set():
            return None
        simulated = _replicate(fitted, schedule, np.random.default_rng(int(seed)))
        refit = fit_model(fitted, simulated, starts=1, intervals="wald")
        with lock:
            done[0] += 1
            if callback is not None:
                try:
                    callback(done[0] / draws)
                except BaseException:
                    cancelled.set()
                    raise
        if not refit.converged:
            return None
        linked, se = link_scale_standard_errors(spec, refit.free_vector, refit.covariance)
        with np.errstate(invalid="ignore", divide="ignore"):
            z = (linked - linked_hat) / se
        keep = usable_hat & np.isfinite(z) & (se <= WEAK_STANDARD_ERROR) & (se > 0)
        return z[keep]

    workers = max(1, min(threads or min(os.cpu_count() or 1, 4), draws))
    if workers == 1:
        results = [one(s) for s in seeds]
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            futures = [pool.submit(one, s) for s in seeds]
            wait(futures, return_when=FIRST_EXCEPTION)
            failed = next((f for f in futures if f.done() and f.exception() is not None), None)
            if failed is not None:     # a cancelled fit (the callback raised): drop the refits not started
                cancelled.set()
                for f in futures:
                    f.cancel()
                raise failed.exception()
            results = [f.result() for f in futures]
    kept = [z for z in results if z is not None]
    pooled = np.concatenate(kept) if kept else np.zeros(0)
    if pooled.size == 0:
        return IntervalCalibration(draws, 0, PROFILE_THRESHOLD, 1.0, float("nan"), 0)
    threshold = max(PROFILE_THRESHOLD, float(np.quantile(pooled ** 2, 0.95)))
    return IntervalCalibration(draws, len(kept), threshold, math.sqrt(threshold / PROFILE_THRESHOLD),
                               float(np.mean(pooled ** 2 > PROFILE_THRESHOLD)), int(pooled.size))


def calibration_warnings(calibration: IntervalCalibration) -> list:
    """A warning when the calibration had to widen the intervals a lot or had too few usable refits."""
    out = []
    if calibration.used < max(10, calibration.draws // 2):
        out.append(f"only {calibration.used} of {calibration.draws} calibration refits converged: the intervals' "
                   "calibrated width is rough")
    if calibration.multiplier > WIDE_CALIBRATION:
        out.append(f"this caseload does not settle the model firmly: refits of caseloads simulated from the fitted "
                   f"model missed their own 95% intervals {calibration.exceed_fraction:.0%} of the time (5% "
                   f"expected), so every interval was widened {calibration.multiplier:.1f} times; read the estimates "
                   "as approximate - the stages' meanings may shift with more data")
    return out
