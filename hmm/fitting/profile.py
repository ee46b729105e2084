"""Profile-likelihood intervals for any smooth function of the free parameters.

The 95% profile-likelihood interval of a quantity ``psi = g(theta)`` is the set of values ``psi``
whose profile log-likelihood ``max {l(theta) : g(theta) = psi}`` is within ``q / 2`` of the
maximum, ``q = chi2_1(0.95) = 3.841`` (``scipy.stats.chi2.ppf(0.95, 1)``): the likelihood-ratio test
of ``psi`` inverted (Pawitan 2001, *In All Likelihood*, sections 2.6 and 3.4).

How the ends are found (constrained optimisation, not a grid): ``psi`` lies in that set exactly
when some ``theta`` with ``g(theta) = psi`` has ``l(theta) >= l_max - q / 2``, so the upper end is

    max g(theta)  subject to  l(theta) >= l_max - q / 2  (and the optimiser's bounds on theta),

and the lower end the same with min (Neale & Miller 1997, Behavior Genetics 27:113-120; the same
formulation as Venzon & Moolgavkar 1988, Applied Statistics 37:87-94, solved with a general
constrained optimiser instead of their Newton iteration). This holds for *any* function ``g`` -
a coordinate (a log rate, a log hazard ratio), an observation probability (a softmax of several
logits) or a mean time in stage ``-1/q_rr`` (a function of every rate out of the stage) - so there is
no reparametrisation per kind, and parameters added to the vector later get intervals for free.
Each end is one ``scipy.optimize.minimize(method="SLSQP")`` run with the analytic gradient of
``l`` and a finite-difference gradient of ``g``. It is started at the Wald end and works in
*whitened* coordinates ``theta = theta_hat + A z`` with ``A A' = I^-1`` (eigenvalues of the observed
information floored), where ``l`` is close to ``l_max - |z|^2 / 2``: SLSQP's initial Hessian guess
(the identity) is then about right, and it usually converges in a few iterations.

An end is *open* when the optimum sits on one of the optimiser's bounds (a log rate at
``log 1e-12`` or ``log 10``, a log hazard ratio at +/-20, a logit at +/-25) while the likelihood
constraint is still slack: the profile never falls to the threshold on that side inside the
allowed range. For a rate's lower end or a probability's end that means "the data allow 0 (or 1)";
otherwise (no upper bound on a rate or mean time, either end of a log hazard ratio) the quantity is
*weakly identified*.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.stats

__all__ = ["ProfileEnd", "ProfileProblem", "profile_interval", "PROFILE_THRESHOLD"]

#: chi-squared(1) 95% point: the LR statistic at which the interval ends.
PROFILE_THRESHOLD = float(scipy.stats.chi2.ppf(0.95, 1))
#: Distance (on the unconstrained scale) below which a parameter counts as on its bound.
_ON_BOUND = 1e-4
#: Likelihood slack (log-likelihood units) above which the LR constraint counts as not active.
_SLACK = 0.05
_MAX_ITERATIONS = 40
_MAX_EVALUATIONS = 100
_TOLERANCE = 1e-3
#: Optimiser bounds further than this many Wald standard errors from the estimate are left out.
_REACH = 12.0
#: Bound on each whitened coordinate (the quadratic approximation puts the end at |z| = 1.96).
_Z_LIMIT = 12.0


@dataclass(frozen=True)
class ProfileEnd:
    """One end of a profile interval on the link scale.

    Attributes
    ----------
    value : float
        ``g`` at the end (link scale); meaningful only when ``found``.
    found : bool
        The optimiser converged to a point on the likelihood-ratio boundary or on a bound.
    open : bool
        The end lies on an optimiser bound with the likelihood constraint slack (see module docstring).
    evaluations : int
        Likelihood evaluations used.
    better_log_likelihood : float or None
        A log-likelihood above the reported maximum met on the way (the fit had not reached the
        maximum), else None.
    """

    value: float
    found: bool
    open: bool
    evaluations: int
    better_log_likelihood: float | None = None


class ProfileProblem:
    """The fixed part of profiling one fit: objective, maximum, bounds and whitening.

    Parameters
    ----------
    objective : callable(theta, gradient) -> (float, ndarray or None)
        The (penalised) log-likelihood that was maximised and, when ``gradient`` is true, its
        gradient, shape (p,).
    theta_hat : ndarray, shape (p,)
        The estimate.
    log_likelihood_max : float
        ``objective(theta_hat)[0]``.
    information : ndarray, shape (p, p)
        Observed information at ``theta_hat`` (for whitening and the start only; not for the interval).
    lower, upper : ndarray, shape (p,)
        The optimiser's bounds.
    threshold : float
        LR statistic at the ends (default the chi-squared(1) 95% point).
    """

    def __init__(self, objective, theta_hat, log_likelihood_max, information, lower, upper,
                 threshold: float = PROFILE_THRESHOLD):
        self.objective = objective
        self.theta_hat = np.asarray(theta_hat, dtype=float)
        self.log_likelihood_max = float(log_likelihood_max)
        self.lower, self.upper = np.asarray(lower, float), np.asarray(upper, float)
        self.threshold = float(threshold)
        p = self.theta_hat.size
        info = np.asarray(information, dtype=float)
        if info.shape != (p, p) or not np.all(np.isfinite(info)):
            info = np.eye(p)
        values, vectors = np.linalg.eigh(0.5 * (info + info.T))
        floor = max(values.max(initial=0.0), 1.0) * 1e-8
        values = np.maximum(values, floor)
        self.whitening = vectors / np.sqrt(values)          # A: theta = theta_hat + A z, A A' = I^-1
        self._cache_key = None
        self._cache = None
        self.evaluations = 0
        self.budget = np.inf
        #: The highest objective value met above the maximum + 0.01 (the fit had not finished), else None.
        self.better_log_likelihood = None

    def _log_likelihood(self, theta, gradient: bool = True):
        """Objective (and gradient) at ``theta`` clipped to the bounds (SLSQP may step outside them).

        SLSQP asks for the value at every trial point of its line search and the gradient only at
        accepted points, so the gradient is computed on demand (a value alone costs a fraction).
        """
        theta = np.clip(theta, self.lower, self.upper)
        key = theta.tobytes()
        if key != self._cache_key or (gradient and self._cache[1] is None):
            if self.evaluations >= self.budget:
                raise _OutOfBudget()
            try:
                with np.errstate(all="ignore"):
                    value, grad = self.objective(theta, gradient)
            except (np.linalg.LinAlgError, FloatingPointError, ValueError):
                value, grad = -np.inf, None
            self.evaluations += 1
            if not np.isfinite(value):
                value, grad = -1e10, np.zeros_like(theta)
            elif grad is not None and not np.all(np.isfinite(grad)):
                grad = np.zeros_like(theta)
            if value > self.log_likelihood_max + 0.01 and (self.better_log_likelihood is None
                                                            or value > self.better_log_likelihood):
                self.better_log_likelihood = float(value)
            self._cache_key, self._cache = key, (float(value), None if grad is None else np.asarray(grad, float))
        return self._cache


class _OutOfBudget(Exception):
    """The search for one end used its share of likelihood evaluations."""


def _gradient(function, theta, depends_on):
    grad = np.zeros(theta.size)
    for i in depends_on:
        h = 1e-6 * max(1.0, abs(theta[i]))
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        grad[i] = (function(up) - function(down)) / (2 * h)
    return grad


def profile_interval(problem: ProfileProblem, quantity, depends_on=None) -> tuple:
    """Both ends of the profile-likelihood interval of ``quantity(theta)`` (a link-scale value).

    Parameters
    ----------
    problem : ProfileProblem
    quantity : callable(theta) -> float
        The quantity on its link scale (log of a rate or time, a log hazard ratio, a logit).
    depends_on : array of int, optional
        Parameter positions the quantity depends on (default: found by perturbation).

    Returns
    -------
    lower, upper : ProfileEnd
    """
    theta_hat = problem.theta_hat
    if depends_on is None:
        base = quantity(theta_hat)
        depends_on = [i for i in range(theta_hat.size)
                      if _changes(quantity, theta_hat, i, base)]
    depends_on = np.asarray(depends_on, dtype=np.int64)
    return tuple(_one_end(problem, quantity, depends_on, sign) for sign in (-1.0, 1.0))


def _changes(quantity, theta, i, base) -> bool:
    up = theta.copy()
    up[i] += 1e-4
    return bool(quantity(up) != base)


def _one_end(problem: ProfileProblem, quantity, depends_on, sign: float) -> ProfileEnd:
    A = problem.whitening
    theta_hat, l_max = problem.theta_hat, problem.log_likelihood_max
    target = l_max - problem.threshold / 2.0
    start_evaluations = problem.evaluations
    g0 = _gradient(quantity, theta_hat, depends_on)
    direction = A.T @ g0                                   # gradient of g in z
    norm = float(np.linalg.norm(direction))
    if norm == 0.0 or not np.isfinite(norm):
        return ProfileEnd(float(quantity(theta_hat)), False, False, 0)
    scale = np.sqrt(problem.threshold) / norm               # Lagrange multiplier about 1 at the end
    z0 = sign * np.sqrt(problem.threshold) * direction / norm
    # keep the start inside the bounds (shrink towards the estimate)
    for _ in range(40):
        theta0 = theta_hat + A @ z0
        if np.all(theta0 >= problem.lower) and np.all(theta0 <= problem.upper):
            break
        z0 = 0.5 * z0
    best = {"value": None}

    def theta_of(z):
        return theta_hat + A @ z

    def fun(z):
        return -sign * scale * quantity(theta_of(z))

    def fun_grad(z):
        return -sign * scale * (A.T @ _gradient(quantity, theta_of(z), depends_on))

    def con(z):
        value, _ = problem._log_likelihood(theta_of(z), gradient=False)
        if value > l_max + 1e-3 and (best["value"] is None or value > best["value"]):
            best["value"] = value
        return np.array([value - target])

    def con_grad(z):
        _, grad = problem._log_likelihood(theta_of(z))
        return (A.T @ grad)[None, :]

    # Only the optimiser bounds the search could reach (within REACH Wald standard errors) become
    # constraints: each one costs SLSQP's quadratic subproblem time, and most are far away.
    spread = np.sqrt(np.sum(A * A, axis=1))
    reach_low = np.flatnonzero(theta_hat - problem.lower < _REACH * spread)
    reach_high = np.flatnonzero(problem.upper - theta_hat < _REACH * spread)
    constraints = [{"type": "ineq", "fun": con, "jac": con_grad}]
    if reach_low.size:
        constraints.append({"type": "ineq", "fun": lambda z: theta_of(z)[reach_low] - problem.lower[reach_low],
                            "jac": lambda z: A[reach_low]})
    if reach_high.size:
        constraints.append({"type": "ineq", "fun": lambda z: problem.upper[reach_high] - theta_of(z)[reach_high],
                            "jac": lambda z: -A[reach_high]})
    z_bounds = [(-_Z_LIMIT, _Z_LIMIT)] * z0.size     # keeps line-search trials near the likelihood region
    problem.budget = problem.evaluations + _MAX_EVALUATIONS
    try:
        with np.errstate(all="ignore"):
            res = scipy.optimize.minimize(fun, z0, jac=fun_grad, method="SLSQP", constraints=constraints,
                                          bounds=z_bounds, options={"maxiter": _MAX_ITERATIONS, "ftol": _TOLERANCE})
    except _OutOfBudget:
        return ProfileEnd(float("nan"), False, False, problem.evaluations - start_evaluations, best["value"])
    finally:
        problem.budget = np.inf
    theta = np.clip(theta_of(res.x), problem.lower, problem.upper)
    value = float(quantity(theta))
    slack = float(con(res.x)[0])
    low, high = theta <= problem.lower + _ON_BOUND, theta >= problem.upper - _ON_BOUND
    # the whitened box counts as a bound too: the profile is still above the threshold that far out
    on_bound = bool(np.any(low | high)) or bool(np.any(np.abs(res.x) >= _Z_LIMIT - 1e-6))
    own_bound = bool(np.any((low | high)[depends_on]))
    feasible = slack > -0.02
    active = abs(slack) <= _SLACK
    found = bool(feasible and (res.success or active or on_bound) and np.isfinite(value))
    # open: stopped by a bound rather than by the likelihood
    # (or, for a single coordinate, that coordinate at its own bound)
    is_open = bool(found and ((on_bound and slack > _SLACK) or (depends_on.size == 1 and own_bound)))
    return ProfileEnd(value, found, is_open, problem.evaluations - start_evaluations, best["value"])
