"""Profile-likelihood intervals for any smooth function of the free parameters.

The 95% profile-likelihood interval of a quantity ``psi = g(theta)`` is the set of values ``psi``
whose profile log-likelihood ``l_p(psi) = max {l(theta) : g(theta) = psi}`` is within ``q / 2`` of
the maximum, ``q = chi2_1(0.95) = 3.841`` (``scipy.stats.chi2.ppf(0.95, 1)``): the likelihood-ratio
test of ``psi`` inverted (Pawitan 2001, *In All Likelihood*, sections 2.6 and 3.4).

How an end is found: a one-dimensional root search along the profile. The profile deviance
``D(psi) = 2 (l_max - l_p(psi))`` is evaluated at trial values of ``psi`` walking out from the
estimate (first the Wald end, then steps predicted from the signed root ``sqrt(D)``, which is nearly
linear in ``psi``) until ``D`` passes ``q`` - the end is then bracketed - and
``scipy.optimize.brentq`` finds the root of ``sqrt(D(psi)) - sqrt(q)`` in the bracket (the same
root as ``D - q``; the square root is nearly linear, so Brent's method needs few steps).

Each ``l_p(psi)`` is an inner maximisation over the nuisance directions (L-BFGS-B with the analytic
gradient), warm-started from the nuisance optimum of the nearest ``psi`` already profiled. It works
in *whitened* coordinates ``theta = theta_hat + A z`` with ``A A' = I^-1`` (eigenvalues of the
observed information floored), where ``l`` is close to ``l_max - |z|^2 / 2``: with ``d`` the unit
gradient of ``g`` in ``z``, ``z = s d + w`` with ``w`` orthogonal to ``d`` free and ``s`` solved
from ``g = psi`` (exactly, for a coordinate; by Newton's method otherwise), and the gradient in
``w`` follows from the implicit function theorem. So the same code serves a coordinate (a log rate,
a log hazard ratio), an observation probability (a softmax of several logits) and a mean time in
stage ``-1/q_rr`` (a function of every rate out of the stage), and parameters added to the vector
later get intervals for free. The optimiser's bounds on ``theta`` are kept by evaluating ``l`` at
the clipped point with a quadratic penalty on the distance outside.

An end has one of three outcomes (:attr:`ProfileEnd.outcome`):

* ``"profile"``: the root was found;
* ``"bound reached"``: ``psi`` reached its limit (a log rate at ``log 1e-12`` or ``log 10``, a log
  hazard ratio at +/-20, a logit at +/-23, or no ``theta`` inside the bounds gives that ``psi``)
  with the deviance still below ``q``: the interval is one-sided there. For a rate's lower end or a
  probability's end that means "the data allow 0 (or 1)"; otherwise (no upper bound on a rate or
  mean time, either end of a log hazard ratio) the quantity is *weakly identified*;
* ``"failed"``: the search gave up (:attr:`ProfileEnd.reason` says why); the caller shows the Wald
  interval and says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.stats

__all__ = ["ProfileEnd", "ProfileProblem", "profile_interval", "PROFILE_THRESHOLD"]

#: chi-squared(1) 95% point: the LR statistic at which the interval ends.
PROFILE_THRESHOLD = float(scipy.stats.chi2.ppf(0.95, 1))
#: Likelihood evaluations one end may use before the search gives up.
MAX_EVALUATIONS_PER_END = 250
#: Trial values of psi while walking out to bracket the end.
_MAX_WALK = 10
#: Quadratic penalty (log-likelihood units per unit^2 of theta) outside the optimiser's bounds.
_PENALTY = 100.0
#: Root accuracy on the link scale, as a fraction of the Wald standard error of psi.
_ROOT_TOLERANCE = 0.01
#: Largest distance (link scale) from the estimate a search walks for a quantity without given limits.
_FAR = 30.0


@dataclass(frozen=True)
class ProfileEnd:
    """One end of a profile interval on the link scale.

    Attributes
    ----------
    value : float
        ``g`` at the end (link scale); nan when the search failed.
    outcome : {"profile", "bound reached", "failed"}
        See the module docstring.
    evaluations : int
        Likelihood evaluations used.
    reason : str
        Why the search failed ("" otherwise).
    better_log_likelihood : float or None
        A log-likelihood above the reported maximum met on the way (the fit had not reached the
        maximum), else None.
    """

    value: float
    outcome: str
    evaluations: int
    reason: str = ""
    better_log_likelihood: float | None = None

    @property
    def found(self) -> bool:
        return self.outcome != "failed"

    @property
    def open(self) -> bool:
        """The profile stays under the threshold up to the limit: a one-sided end."""
        return self.outcome == "bound reached"


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
        Observed information at ``theta_hat`` (for whitening and the first step only).
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
        floor = 0.25          # directions with a standard error above 2 are whitened as if it were 2
        values = np.maximum(values, floor)
        self.whitening = vectors / np.sqrt(values)          # A: theta = theta_hat + A z, A A' = I^-1
        self.evaluations = 0
        self.budget = np.inf
        #: Ends already found for a coordinate theta_i (quantities affine in it reuse them).
        self.coordinate_ends = {}
        #: The highest objective value met above the maximum + 0.01 (the fit had not finished), else None.
        self.better_log_likelihood = None

    def penalised_log_likelihood(self, theta):
        """``l`` at ``theta`` clipped to the bounds minus the penalty outside them, and its gradient."""
        if self.evaluations >= self.budget:
            raise _OutOfBudget()
        clipped = np.clip(theta, self.lower, self.upper)
        outside = theta - clipped
        try:
            with np.errstate(all="ignore"):
                value, grad = self.objective(clipped, True)
        except (np.linalg.LinAlgError, FloatingPointError, ValueError):
            value, grad = -np.inf, None
        self.evaluations += 1
        if not np.isfinite(value) or grad is None or not np.all(np.isfinite(grad)):
            raise _NotFinite()
        if value > self.log_likelihood_max + 0.01 and (self.better_log_likelihood is None
                                                        or value > self.better_log_likelihood):
            self.better_log_likelihood = float(value)
        grad = np.where(outside != 0, 0.0, np.asarray(grad, float)) - 2 * _PENALTY * outside
        return float(value) - _PENALTY * float(outside @ outside), grad


class _OutOfBudget(Exception):
    """The search for one end used its share of likelihood evaluations."""


class _NotFinite(Exception):
    """The log-likelihood or its gradient is not finite at a trial point."""


def _gradient(function, theta, depends_on):
    grad = np.zeros(theta.size)
    for i in depends_on:
        h = 1e-6 * max(1.0, abs(theta[i]))
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        grad[i] = (function(up) - function(down)) / (2 * h)
    return grad


def profile_interval(problem: ProfileProblem, quantity, depends_on=None, limits=None) -> tuple:
    """Both ends of the profile-likelihood interval of ``quantity(theta)`` (a link-scale value).

    Parameters
    ----------
    problem : ProfileProblem
    quantity : callable(theta) -> float
        The quantity on its link scale (log of a rate or time, a log hazard ratio, a logit).
    depends_on : array of int, optional
        Parameter positions the quantity depends on (default: found by perturbation).
    limits : (float, float), optional
        The smallest and largest link-scale value the quantity can take (default: 30 from the
        estimate, or where no ``theta`` inside the bounds gives the value).

    Returns
    -------
    lower, upper : ProfileEnd
    """
    theta_hat = problem.theta_hat
    if depends_on is None:
        base = quantity(theta_hat)
        depends_on = [i for i in range(theta_hat.size) if _changes(quantity, theta_hat, i, base)]
    depends_on = np.asarray(depends_on, dtype=np.int64)
    affine = _affine_in_one_coordinate(quantity, theta_hat, depends_on)
    if affine is None:
        search = _Search(problem, quantity, depends_on, limits, coordinate=None)
        return tuple(search.end(sign) for sign in (-1.0, 1.0))
    # a*theta_i + b (a log rate, a log hazard ratio, the log mean time in a stage with one exit): profile
    # theta_i once and map its ends (the profile is invariant under one-to-one transformations)
    i, a, b = affine
    ends = problem.coordinate_ends.get(i)
    if ends is None:
        search = _Search(problem, lambda th: th[i], depends_on, None, coordinate=i)
        ends = problem.coordinate_ends[i] = tuple(search.end(sign) for sign in (-1.0, 1.0))
    mapped = tuple(ProfileEnd(a * e.value + b, e.outcome, e.evaluations, e.reason, e.better_log_likelihood)
                   for e in ends)
    return mapped if a > 0 else mapped[::-1]


def _changes(quantity, theta, i, base) -> bool:
    up = theta.copy()
    up[i] += 1e-4
    return bool(quantity(up) != base)


class _Search:
    """The profile of one quantity: the constraint ``g(theta) = psi`` and the inner maximisation."""

    def __init__(self, problem: ProfileProblem, quantity, depends_on, limits, coordinate):
        self.problem, self.quantity, self.depends_on = problem, quantity, depends_on
        A = problem.whitening
        self.psi_hat = float(quantity(problem.theta_hat))
        g_z = A.T @ _gradient(quantity, problem.theta_hat, depends_on)
        self.se = float(np.linalg.norm(g_z))                 # Wald standard error of psi (link scale)
        self.d = g_z / self.se if self.se > 0 and np.isfinite(self.se) else g_z
        # a coordinate: g = theta_i exactly, so s follows from psi in closed form
        self.coordinate = coordinate
        if self.coordinate is not None:
            limits = (problem.lower[self.coordinate], problem.upper[self.coordinate])
        elif limits is None:
            limits = (self.psi_hat - _FAR, self.psi_hat + _FAR)
        self.limits = (max(limits[0], self.psi_hat - _FAR), min(limits[1], self.psi_hat + _FAR))

    # ---------------------------------------------------------------- the constraint
    def _theta(self, s, w):
        return self.problem.theta_hat + self.problem.whitening @ (s * self.d + w)

    def _solve_s(self, psi, w, s0):
        """``s`` with ``g(theta(s, w)) = psi`` (None when Newton's method cannot reach it)."""
        if self.coordinate is not None:
            i = self.coordinate
            A = self.problem.whitening
            return (psi - self.problem.theta_hat[i] - A[i] @ w) / (A[i] @ self.d)
        s = s0
        for _ in range(30):
            theta = self._theta(s, w)
            value = self.quantity(theta)
            if not np.isfinite(value):
                return None
            miss = value - psi
            if abs(miss) < 1e-9 * max(1.0, abs(psi)):
                return s
            slope = float(_gradient(self.quantity, theta, self.depends_on) @ (self.problem.whitening @ self.d))
            if slope <= 0 or not np.isfinite(slope):
                return None
            step = -miss / slope
            s += float(np.clip(step, -5.0, 5.0))
        return None

    def _inner(self, psi, w0, s0):
        """Maximise ``l`` over ``g(theta) = psi`` from ``(w0, s0)``; ``(l_p, w, s)`` or None."""
        problem, d = self.problem, self.d
        A = problem.whitening
        state = {"s": s0}

        def minus(u):
            w = u - d * (d @ u)
            s = self._solve_s(psi, w, state["s"])
            if s is None:
                raise _NotFinite()
            state["s"] = s
            theta = self._theta(s, w)
            value, grad = problem.penalised_log_likelihood(theta)
            l_z = A.T @ grad
            g_z = A.T @ _gradient(self.quantity, theta, self.depends_on) if self.coordinate is None \
                else A[self.coordinate]
            along = g_z @ d
            ds = -(g_z - d * along) / along                   # ds/dw (implicit function theorem)
            grad_u = (l_z - d * (l_z @ d)) + (l_z @ d) * ds
            grad_u = grad_u - d * (d @ grad_u)
            return problem.log_likelihood_max - value, -grad_u

        best = {"f": np.inf}

        def tracked(u):
            try:
                f, g = minus(u)
            except _NotFinite:
                return 1e6, np.zeros_like(u)
            if f < best["f"]:
                best.update(f=f, u=u.copy(), s=state["s"])
            return f, g

        scipy.optimize.minimize(tracked, w0, jac=True, method="L-BFGS-B",
                                options={"maxiter": 40, "ftol": 2e-3, "gtol": 2e-2, "maxcor": 10})
        if not np.isfinite(best["f"]) or best["f"] >= 1e5:
            return None
        return problem.log_likelihood_max - best["f"], best["u"], best["s"]

    # ---------------------------------------------------------------- one end
    def end(self, sign: float) -> ProfileEnd:
        problem = self.problem
        start = problem.evaluations
        if not (self.se > 0 and np.isfinite(self.se)):
            return ProfileEnd(float("nan"), "failed", 0, "no direction in which the quantity changes")
        q = problem.threshold
        limit = self.limits[1] if sign > 0 else self.limits[0]
        points = {self.psi_hat: (0.0, np.zeros_like(self.d), 0.0)}   # psi -> (deviance, w, s)

        def deviance(psi):
            near = min(points, key=lambda x: abs(x - psi))
            _, w0, s0 = points[near]
            s_guess = s0 + (psi - near) / self.se
            found = self._inner(psi, w0, s_guess)
            if found is None:
                return None
            l_p, w, s = found
            points[psi] = (max(0.0, 2.0 * (problem.log_likelihood_max - l_p)), w, s)
            return points[psi][0]

        problem.budget = problem.evaluations + MAX_EVALUATIONS_PER_END
        try:
            with np.errstate(all="ignore"):
                inside, outside = self.psi_hat, None
                distance = math.sqrt(q) * self.se
                for _ in range(_MAX_WALK):
                    psi = self.psi_hat + sign * distance
                    at_limit = sign * (psi - limit) >= 0
                    if at_limit:
                        psi = limit
                    value = deviance(psi)
                    if value is None:          # no theta inside the bounds gives psi: the limit is before it
                        return self._result("bound reached", inside, start)
                    if value >= q:
                        outside = psi
                        break
                    inside = psi
                    if at_limit:
                        return self._result("bound reached", limit, start)
                    root = math.sqrt(value)
                    predicted = distance * math.sqrt(q) / root * 1.1 if root > 1e-6 else 4 * distance
                    distance = min(max(predicted, 1.25 * distance), 4 * distance)
                if outside is None:
                    return self._result("failed", float("nan"), start,
                                        f"the deviance stayed below {q:.2f} for {_MAX_WALK} steps")

                def signed(psi):
                    value = points[psi][0] if psi in points else deviance(psi)
                    if value is None:
                        raise _NotFinite()
                    return math.sqrt(value) - math.sqrt(q)

                root = scipy.optimize.brentq(signed, min(inside, outside), max(inside, outside),
                                             xtol=_ROOT_TOLERANCE * self.se, maxiter=30)
                return self._result("profile", float(root), start)
        except _OutOfBudget:
            return self._result("failed", float("nan"), start,
                                f"used {MAX_EVALUATIONS_PER_END} likelihood evaluations")
        except _NotFinite:
            return self._result("failed", float("nan"), start, "the likelihood is not finite along the profile")
        except (RuntimeError, ValueError) as exc:
            return self._result("failed", float("nan"), start, f"root search: {exc}")
        finally:
            problem.budget = np.inf

    def _result(self, outcome, value, start, reason=""):
        return ProfileEnd(float(value), outcome, self.problem.evaluations - start, reason,
                          self.problem.better_log_likelihood)


def _affine_in_one_coordinate(quantity, theta, depends_on):
    """``(i, a, b)`` when ``quantity(theta) = a theta[i] + b`` near ``theta`` (checked at three points), else None."""
    if depends_on.size != 1:
        return None
    i = int(depends_on[0])
    probe = theta.copy()
    values = []
    for delta in (0.0, 0.37, -1.3):
        probe[i] = theta[i] + delta
        values.append(float(quantity(probe)))
    a = (values[1] - values[0]) / 0.37
    b = values[0] - a * theta[i]
    if not (np.isfinite(a) and np.isfinite(b)) or a == 0:
        return None
    if abs(values[2] - (a * (theta[i] - 1.3) + b)) > 1e-8 * max(1.0, abs(values[2])):
        return None
    return i, a, b
