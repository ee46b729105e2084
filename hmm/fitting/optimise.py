"""Maximum-likelihood (or penalised) fit: multi-start L-BFGS-B on the analytic gradient.

Each start is optimised with ``scipy.optimize.minimize(method="L-BFGS-B")`` on the unconstrained
parameters (:mod:`hmm.fitting.parameters`), the objective being minus the (penalised)
log-likelihood with its analytic gradient (:mod:`hmm.fitting.likelihood`). Start 0 is the model
as given; further starts perturb it on the unconstrained scale (normal, sd ``START_SPREAD``)
with the ``rng`` supplied. The best end point is kept; the observed information there gives the
standard errors (:mod:`hmm.fitting.uncertainty`).

Convergence: L-BFGS-B stops when the relative decrease of the objective falls below
``tolerance`` or the largest projected gradient component below ``GRADIENT_TOLERANCE``; a fit that
stops for any other reason (iteration limit, line-search failure) is reported as not converged.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.optimize

from ..model import StageModel
from ..random_state import random_generator
from ..timelines import Timelines
from .likelihood import evaluate, prepare
from .parameters import parameter_spec
from .priors import Prior
from .intervals import (choose_interval_kind, condition_number, effect_warnings, estimates_with_intervals,
                        identification_warnings)
from .calibration import calibrate_intervals, calibration_warnings
from .profile import PROFILE_THRESHOLD, ProfileProblem
from .result import FitProgress, FitResult, StartResult
from .summary import FitIteration
from .uncertainty import covariance_from_information, observed_information

__all__ = ["fit_model", "START_SPREAD"]

START_SPREAD = 0.5
GRADIENT_TOLERANCE = 1e-6
_EXPECTED_ITERATIONS = 80   # for progress reporting only


class _Objective:
    """Minus (penalised) log-likelihood with gradient, counting evaluations and caching the last one."""

    def __init__(self, plan, prior):
        self.plan, self.prior = plan, prior
        # minimise -logL / n_contacts so gradients are O(1) whatever the caseload size
        self.scale = 1.0 / max(plan.timelines.n_contacts, 1)
        self.evaluations = 0
        self.last_x = None
        self.last = None

    def __call__(self, theta):
        self.evaluations += 1
        ev = evaluate(self.plan, theta)
        value, grad = ev.log_likelihood, ev.gradient
        if self.prior is not None:
            pv, pg = self.prior.log_density_and_gradient(theta, self.plan.spec)
            value, grad = value + pv, grad + pg
        if not np.isfinite(value) or not np.all(np.isfinite(grad)):
            value, grad = -np.inf, np.zeros_like(theta)
        self.last_x, self.last = theta.copy(), (value, grad)
        return -value * self.scale, -grad * self.scale

    def log_likelihood_function(self, theta, gradient=True):
        """(Penalised) log-likelihood and, if asked, its gradient: the profile search's objective."""
        self.evaluations += 1
        ev = evaluate(self.plan, theta, gradient=gradient)
        value, grad = ev.log_likelihood, ev.gradient
        if self.prior is not None:
            pv, pg = self.prior.log_density_and_gradient(theta, self.plan.spec)
            value = value + pv
            grad = None if grad is None else grad + pg
        return value, grad

    def gradient(self, theta):
        """Gradient of the (penalised) log-likelihood itself (unscaled)."""
        self(theta)
        return self.last[1]


def fit_model(model: StageModel, timelines: Timelines, *, starts: int = 3, rng: np.random.Generator | None = None,
              penalised: bool = False, prior: Prior | None = None, callback=None, max_iterations: int = 500,
              tolerance: float = 1e-10, standard_errors: bool = True, observed_until=None,
              intervals: str = "auto", on_progress=None, calibration_draws: int = 0) -> FitResult:
    """Fit every free parameter of ``model`` to ``timelines``.

    Parameters
    ----------
    model : StageModel
        Structure, fixed values and the first start.
    timelines : Timelines
        Coded in the model's stage, category and covariate order.
    starts : int
        Number of starts (1 = only the given model).
    rng : numpy.random.Generator, optional
        For the perturbed starts (seed or Generator; None: fresh entropy, see ``hmm.random_state``).
    penalised : bool
        Maximise log-likelihood + log prior (``prior`` or :class:`Prior` defaults).
    prior : Prior, optional
        Implies ``penalised=True``.
    callback : callable(fraction), optional
        Progress in [0, 1]; raising from it cancels the fit (the exception propagates).
    max_iterations : int
        L-BFGS-B iteration limit per start.
    tolerance : float
        Relative decrease of the objective at which a start has converged.
    standard_errors : bool
        Compute the observed information (about two gradient evaluations per free parameter) for
        standard errors and intervals. False skips it (for example when refitting bootstrap
        replicates): every interval is then reported as not available (as ``intervals="none"``).
    intervals : {"auto", "profile", "wald", "none"}
        Kind of 95% interval (:func:`hmm.fitting.intervals.choose_interval_kind`): ``"auto"`` gives
        profile-likelihood intervals below 5,000 cases or when the information is ill-conditioned.
    on_progress : callable(FitProgress), optional
        Typed progress (phase, start, iteration, log-likelihood) beside ``callback``.
    calibration_draws : int
        Refits of caseloads simulated from the fitted model that calibrate the intervals' width
        (:mod:`hmm.fitting.calibration`; 0, the default: chi-squared theory, no calibration). Not for
        penalised fits. Draws come from ``rng`` after the starts.
    observed_until : float or ndarray, shape (n_cases,), optional
        Only with an ``unscheduled_contacts`` block: the day observation ended (for example the data
        extract); the quiet time from each case's last contact to it enters the likelihood
        (:meth:`hmm.Timelines.with_observation_end`; not for cases whose last contact records an
        exact entry). Without it the likelihood stops at each case's last contact, which fits the
        unscheduled contact rates too high when contacts could have come after it.

    Returns
    -------
    FitResult
    """
    if starts < 1:
        raise ValueError("starts must be at least 1")
    rng = random_generator(rng)
    if prior is not None:
        penalised = True
    prior = (prior or Prior()) if penalised else None
    if not standard_errors:
        intervals = "none"
    spec = parameter_spec(model)
    observed = timelines
    if observed_until is not None and model.unscheduled_contacts is not None:
        timelines = _with_quiet_tail(model, timelines, observed_until)
    plan = prepare(model, timelines, spec)
    objective = _Objective(plan, prior)
    # units of work: one per start, one for the information, and (profile) four for the intervals
    calibrating = calibration_draws > 0 and not penalised and intervals != "none" and spec.n_free > 0
    progress = _Progress(starts + 1.0 + (4.0 if intervals in ("auto", "profile") and spec.n_free else 0.0)
                         + (4.0 if calibrating else 0.0), callback, on_progress)

    runs, histories, ends = _optimise_starts(objective, spec, spec.to_vector(model), starts, rng, max_iterations,
                                             tolerance, progress)
    best = _best_start(runs)
    value, theta, history = runs[best].log_likelihood, ends[best], histories[best]
    converged = runs[best].converged and bool(np.isfinite(value))
    warnings = _start_warnings(runs, best)
    information, covariance, information_warnings = _information_and_covariance(
        objective, spec, theta, value, intervals, lambda f: progress.report((starts + f) / progress.units, "information"))
    warnings += information_warnings
    kind, reason = _interval_kind(intervals, timelines.n_cases, spec, information, value, converged)
    warnings += _boundary_warnings(spec, theta)
    warnings += effect_warnings(spec, theta)
    calibration = None
    if calibrating and kind in ("profile", "wald") and converged and np.isfinite(np.diag(covariance)).any():
        calibration = calibrate_intervals(
            spec.to_model(theta), observed, spec, theta, covariance, int(calibration_draws),
            np.random.default_rng(int(rng.integers(0, 2 ** 63 - 1))),
            callback=lambda f: progress.report((starts + 1 + 4 * f) / progress.units, "calibration"))
        warnings += calibration_warnings(calibration)
    intervals_done = starts + 1 + (4 if calibrating else 0)
    groups, profile_warnings = _estimates_with_intervals(
        objective, spec, theta, value, information, covariance, kind,
        lambda f: progress.report((intervals_done + 4 * f) / progress.units, "intervals"), calibration)
    warnings += profile_warnings
    final = evaluate(plan, theta, gradient=False)
    progress.report(1.0, "done")
    return _fit_result(spec, theta, final.log_likelihood, value if penalised else final.log_likelihood, penalised,
                       observed, timelines.n_cases, runs[best].iterations, objective.evaluations, converged, warnings,
                       history, runs, groups, kind, reason, covariance, information, calibration)


class _Progress:
    """Progress of a fit as a fraction of ``units`` of work, sent to ``callback`` and ``on_progress``."""

    def __init__(self, units: float, callback, on_progress):
        self.units, self.callback, self.on_progress = units, callback, on_progress
        self.done = 0.0

    def report(self, value, phase="start", start=0, iteration=0, log_likelihood=None) -> None:
        self.done = max(self.done, min(value, 1.0))
        if self.callback is not None:
            self.callback(self.done)
        if self.on_progress is not None:
            self.on_progress(FitProgress(self.done, phase, start, iteration, log_likelihood))


def _optimise_starts(objective, spec, theta0, starts, rng, max_iterations, tolerance, progress) -> tuple:
    """Run L-BFGS-B from each start; returns the starts' results, iteration histories and end points."""
    bounds = list(zip(spec.lower, spec.upper))
    runs, histories, ends = [], [], []
    for start in range(starts):
        x0 = theta0 if start == 0 else np.clip(theta0 + rng.normal(0.0, START_SPREAD, theta0.size),
                                               spec.lower, spec.upper)
        history = []
        monitor = _monitor(objective, history, lambda n, ll, _s=start: progress.report(
            (_s + min(n / _EXPECTED_ITERATIONS, 0.95)) / progress.units, "start", _s, n, ll))
        if spec.n_free == 0:
            objective(x0)
            runs.append(StartResult(start, float(objective.last[0]), True, "no free parameters", 0))
            histories.append(history)
            ends.append(x0)
            continue
        res = scipy.optimize.minimize(objective, x0, jac=True, method="L-BFGS-B", bounds=bounds, callback=monitor,
                                      options={"maxiter": max_iterations, "ftol": tolerance,
                                               "gtol": GRADIENT_TOLERANCE, "maxcor": 20})
        runs.append(StartResult(start, -float(res.fun) / objective.scale, bool(res.success), str(res.message),
                                int(res.nit)))
        histories.append(history)
        ends.append(res.x)
        progress.report((start + 1) / progress.units, "start", start, int(res.nit))
    return runs, histories, ends


def _best_start(runs) -> int:
    """Index of the start with the highest (finite) log-likelihood (0 when none is finite)."""
    values = np.array([r.log_likelihood for r in runs])
    return int(np.argmax(values)) if np.isfinite(values).any() else 0


def _start_warnings(runs, best: int) -> list:
    """Warnings about the best start: not finite, not converged, or starts ending at different maxima."""
    values = np.array([r.log_likelihood for r in runs])
    value = runs[best].log_likelihood
    warnings = []
    if not np.isfinite(value):
        warnings.append("the log-likelihood is not finite: at least one case is impossible under the model "
                        "(for example a contact after a recorded move to a stage nobody leaves); nothing was fitted")
    elif not runs[best].converged:
        warnings.append(f"the fit did not converge ({runs[best].message}); estimates may not be the maximum")
    if len(runs) > 1 and np.isfinite(value):
        if np.sum(values > value - 0.1) < len(runs) and np.ptp(values) > 1.0:
            warnings.append(f"starts ended at different log-likelihoods ({', '.join(f'{v:.2f}' for v in values)}); "
                            "the best is reported - the likelihood may have several maxima")
    return warnings


def _information_and_covariance(objective, spec, theta, value, intervals, callback) -> tuple:
    """Observed information at the estimate and the covariance from it (nan when not computed).

    Returns
    -------
    information, covariance : ndarray, shape (n_free, n_free)
    warnings : list of str
    """
    if spec.n_free == 0:
        return np.zeros((0, 0)), np.zeros((0, 0)), []
    if intervals == "none" or not np.isfinite(value):
        nothing = np.full((spec.n_free, spec.n_free), np.nan)
        return nothing, nothing.copy(), []
    # one-sided differences of the analytic gradient: one likelihood evaluation per free parameter instead of
    # two (a third of a large fit's time), the information within about 1e-6 of the central differences
    at_theta = objective.last[1] if objective.last_x is not None and np.array_equal(objective.last_x, theta) else None
    information = observed_information(objective.gradient, theta, callback=callback, differences="one-sided",
                                       gradient_at_theta=at_theta)
    covariance, warnings = covariance_from_information(information, spec.names)
    return information, covariance, warnings + identification_warnings(information, spec.names)


def _interval_kind(intervals, n_cases, spec, information, value, converged) -> tuple:
    """The kind of interval to report (profile, wald or none) and why."""
    kind, reason = choose_interval_kind(intervals, n_cases, information if spec.n_free else None)
    if kind == "profile" and intervals == "auto" and not converged:
        kind, reason = "wald", "the fit did not converge, and a profile needs the maximum"
    if not np.isfinite(value):
        kind, reason = "none", "the log-likelihood is not finite"
    if spec.n_free == 0:
        kind, reason = "none", "no free parameters"
    return kind, reason


def _estimates_with_intervals(objective, spec, theta, value, information, covariance, kind, callback,
                              calibration=None) -> tuple:
    """Estimates grouped for the result, with intervals of ``kind`` (at the calibrated width when
    ``calibration`` is given); warnings from the profile search."""
    problem = None
    threshold = PROFILE_THRESHOLD if calibration is None else calibration.threshold
    if kind == "profile":
        problem = ProfileProblem(objective.log_likelihood_function, theta, value, information, spec.lower, spec.upper,
                                 threshold=threshold)
    groups = estimates_with_intervals(spec, theta, covariance, kind, problem, callback=callback,
                                      z=math.sqrt(threshold))
    warnings = []
    if problem is not None and problem.better_log_likelihood is not None:
        warnings.append(f"the profile search found a log-likelihood above the reported maximum "
                        f"({problem.better_log_likelihood:.2f} > {value:.2f}): the fit had not reached the "
                        "maximum; fit again from this version")
    return groups, warnings


def _fit_result(spec, theta, log_l, penalised_log_l, penalised, observed, n_cases, iterations, evaluations,
                converged, warnings, history, runs, groups, kind, reason, covariance, information,
                calibration=None) -> FitResult:
    """Assemble the :class:`FitResult` (AIC, BIC with ``n = n_cases``, the condition number)."""
    k = spec.n_free
    return FitResult(
        model=spec.to_model(theta), log_likelihood=log_l, penalised_log_likelihood=penalised_log_l,
        penalised=penalised, n_parameters=k, n_cases=observed.n_cases, n_contacts=observed.n_contacts,
        aic=-2 * log_l + 2 * k, bic=-2 * log_l + k * np.log(max(n_cases, 1)),
        iterations=iterations, n_likelihood_evaluations=evaluations, converged=converged,
        warnings=warnings, history=tuple(history), starts=tuple(runs), parameter_names=list(spec.names),
        parameters=groups["parameters"], hazard_ratios=groups["hazard_ratios"],
        mean_time_in_stage=groups["mean_time_in_stage"], next_stage_probabilities=groups["next_stage_probabilities"],
        interval_kind=kind, interval_reason=reason,
        condition_number=condition_number(information) if k and np.all(np.isfinite(information)) else float("nan"),
        covariance=covariance, information=information, free_vector=theta, calibration=calibration)


def _with_quiet_tail(model: StageModel, timelines: Timelines, observed_until) -> Timelines:
    """Timelines extended with a blank scheduled contact at ``observed_until`` (not after an exact-entry record)."""
    from ..exact_entry import _exact_entry_contacts

    ended = _exact_entry_contacts(model, timelines.allowed_stages)[timelines.last_index]
    return timelines.with_observation_end(observed_until, extend=~ended)


def _monitor(objective, history, on_iteration):
    """An L-BFGS-B callback appending a :class:`FitIteration` to ``history``."""

    def monitor(intermediate_result):
        x = intermediate_result.x
        if objective.last_x is not None and np.array_equal(objective.last_x, x):
            value, grad = objective.last
        else:
            objective(x)
            value, grad = objective.last
        history.append(FitIteration(len(history) + 1, float(value), float(np.linalg.norm(grad))))
        on_iteration(len(history), float(value))

    return monitor


def _boundary_warnings(spec, theta) -> list:
    out = []
    arrays = spec.arrays(theta)
    for i, slot in enumerate(spec.rate_slots):
        if slot >= 0 and (theta[slot] <= spec.lower[slot] + 1.0 or arrays.rates[i] < 1e-7):
            out.append(f"{spec.names[slot]} is estimated at (nearly) zero - on the boundary; its interval is "
                       "not reliable and the transition may not be supported by the data")
    m = spec.template
    for c, rows in enumerate(spec.emission_rows):
        for r, row in enumerate(rows):
            if row is None:
                continue
            p = arrays.emissions[c][r]
            if np.any(p[row.support] < 1e-6):
                out.append(f"channel {m.channels[c].name!r}, stage {m.stages[r]}: an observation probability is "
                           "estimated at (nearly) 0 or 1 - on the boundary")
    if spec.unscheduled_rate_slots is not None:
        for r, slot in enumerate(spec.unscheduled_rate_slots):
            if slot >= 0 and theta[slot] <= spec.lower[slot] + 1.0 and f"{spec.names[slot]} is" not in " ".join(out):
                out.append(f"{spec.names[slot]} is estimated at (nearly) zero - on the boundary; its interval is "
                           "not reliable")
    if spec.initial_row is not None and np.any(arrays.initial[spec.initial_row.support] < 1e-6):
        out.append("an initial stage probability is estimated at (nearly) zero - on the boundary")
    return out
