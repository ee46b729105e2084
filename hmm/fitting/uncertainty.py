"""Standard errors and 95% intervals from the observed information.

* Observed information: minus the Hessian of the log-likelihood (or penalised log-likelihood) at the
  optimum, by central finite differences *of the analytic gradient* on the unconstrained scale,
  symmetrised. It is inverted by an eigen-decomposition; directions with eigenvalues below
  ``FLAT_TOLERANCE`` times the largest are treated as flat (not identified): the pseudo-inverse
  leaves them out and a warning names the parameters involved.
* Wald intervals (:mod:`hmm.fitting.intervals`): the delta method on a *link scale* - log for rates
  and mean times in stage, identity for log hazard ratios, logit for probabilities - giving
  ``link ± 1.96 SE`` mapped back to the natural scale (so intervals stay inside the allowed range).
  The standard error reported on the natural scale is the delta-method one
  (``SE_link * d natural / d link``). Profile-likelihood intervals: :mod:`hmm.fitting.profile`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .parameters import ParameterSpec

__all__ = ["ParameterEstimate", "observed_information", "covariance_from_information", "natural_estimates",
           "derived_estimates", "Z_95", "FLAT_TOLERANCE"]

Z_95 = 1.959963984540054          # 97.5% point of the standard normal (scipy.stats.norm.ppf(0.975))
FLAT_TOLERANCE = 1e-8
# An interval whose ends differ by more than this factor says nothing a reader can use (common practice, no source).
UNINFORMATIVE_RATIO = 1e4


@dataclass(frozen=True)
class ParameterEstimate:
    """One reported quantity on its natural scale with a 95% interval (None when not available).

    Attributes
    ----------
    name, kind : str
        Readable name; ``rate``, ``log_hazard_ratio``, ``observation``, ``initial``, ``hazard_ratio``,
        ``mean_time_in_stage`` or ``next_stage_probability``.
    estimate : float
    standard_error, lower, upper : float or None
    fixed : bool
        Not estimated (fixed in the model, or a structural zero).
    interval_kind : {"profile", "wald"} or None
        How ``lower``/``upper`` were found (None: no interval).
    weakly_identified : bool
        The data hardly inform this value (see :mod:`hmm.fitting.intervals`); its interval is not
        shown as a range.
    at_bound : bool
        An end or the estimate is at a natural limit (0 or 1), or a log hazard ratio is implausibly large.
    note : str
        Plain words for the flags (for example ``"no upper bound: weakly identified"``).
    stage : str or None
        The stage of a mean time in stage.
    bound_reached : {"", "lower", "upper", "both"}
        Profile intervals only: the ends at which the profile stayed under the threshold up to the
        quantity's limit (the interval is one-sided there; see :mod:`hmm.fitting.profile`).
    profile_failed : str
        Why the profile search gave up when a Wald interval is shown in its place ("" otherwise).
    """

    name: str
    kind: str
    estimate: float
    standard_error: float | None
    lower: float | None
    upper: float | None
    fixed: bool
    interval_kind: str | None = None
    weakly_identified: bool = False
    at_bound: bool = False
    note: str = ""
    stage: str | None = None
    bound_reached: str = ""
    profile_failed: str = ""

    @property
    def interval_method(self) -> str:
        """How the interval was obtained, in words: ``"profile"``, ``"profile, bound reached (lower)"``,
        ``"wald"``, ``"wald (profile search failed: ...)"``, or ``""`` without an interval."""
        if self.lower is None or self.upper is None or not self.interval_kind:
            return ""
        if self.interval_kind == "profile" and self.bound_reached:
            return f"profile, bound reached ({self.bound_reached})"
        if self.interval_kind == "wald" and self.profile_failed:
            return f"wald (profile search failed: {self.profile_failed})"
        return self.interval_kind

    @property
    def interval_is_informative(self) -> bool:
        """False when the interval is missing, unbounded, weakly identified or too wide to mean anything.

        For rates, hazard ratios and mean times "too wide" means upper / lower above
        :data:`UNINFORMATIVE_RATIO` (four orders of magnitude; for a log hazard ratio, a width above
        its log). Probability intervals are bounded and always reported unless weakly identified.
        """
        lower, upper = self.lower, self.upper
        if self.weakly_identified:
            return False
        if lower is None or upper is None or not (math.isfinite(lower) and math.isfinite(upper)):
            return False
        if self.kind in ("log_hazard_ratio", "unscheduled_log_rate_ratio"):
            return upper - lower <= math.log(UNINFORMATIVE_RATIO)
        if self.kind in ("rate", "hazard_ratio", "mean_time_in_stage", "unscheduled_rate",
                         "unscheduled_per_year"):
            if lower == 0.0 and self.at_bound:      # "the data allow 0": an upper limit is still informative
                return True
            return lower > 0 and upper / lower <= UNINFORMATIVE_RATIO
        return True

    def interval_text(self, fmt) -> str:
        """The interval in words for a table cell: ``"[a, b] profile"``, ``"(fixed)"``, a flag, ..."""
        if self.fixed:
            return "(fixed)"
        if self.lower is None or self.upper is None:
            return "(no interval)" + (f" - {self.note}" if self.note else "")
        if self.weakly_identified and self.bound_reached == "upper" and self.lower is not None and self.lower > 0:
            # one-sided: the profile bounds the value from below only (for example a mean time when the rate may be 0)
            return f"[{fmt(self.lower)}, no upper bound] {self.interval_method} - {self.note}"
        if not self.interval_is_informative:
            return f"(no useful interval: {self.note or 'the data hardly inform this value'})"
        text = f"[{fmt(self.lower)}, {fmt(self.upper)}] {self.interval_method}".rstrip()
        return text + (f" - {self.note}" if self.note else "")

    def to_dict(self) -> dict:
        out = {k: getattr(self, k) for k in ("name", "kind", "estimate", "standard_error", "lower", "upper", "fixed",
                                             "interval_kind", "weakly_identified", "at_bound", "note", "stage",
                                             "bound_reached", "profile_failed")}
        out["interval_method"] = self.interval_method
        out["informative"] = self.interval_is_informative
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "ParameterEstimate":
        """Read :meth:`to_dict` output, including rows stored before interval kinds existed (Wald then)."""
        def number(value):
            return None if value is None else float(value)

        name = str(data["name"])
        kind = str(data["kind"])
        stage = data.get("stage")
        if stage is None and kind == "mean_time_in_stage" and name.startswith("mean time in ") \
                and name.endswith(" (days)"):
            stage = name[len("mean time in "):-len(" (days)")]
        lower, upper = number(data.get("lower")), number(data.get("upper"))
        legacy = "interval_kind" not in data
        interval_kind = ("wald" if lower is not None and upper is not None else None) if legacy \
            else data.get("interval_kind")
        weak = bool(data.get("weakly_identified", legacy and data.get("informative") is False and lower is not None))
        return cls(name, kind, float(data["estimate"]) if data.get("estimate") is not None else math.nan,
                   number(data.get("standard_error")), lower, upper, bool(data.get("fixed", False)),
                   interval_kind=interval_kind, weakly_identified=weak, at_bound=bool(data.get("at_bound", False)),
                   note=str(data.get("note") or ("" if not weak or not legacy else
                                                 "the data hardly inform this value")),
                   stage=None if stage is None else str(stage),
                   bound_reached=str(data.get("bound_reached") or ""),
                   profile_failed=str(data.get("profile_failed") or ""))


#: Step of one-sided differences of the analytic gradient (relative to ``max(1, |theta_i| / 10)``).
ONE_SIDED_STEP = 1e-7


def observed_information(gradient_function, theta: np.ndarray, step: float | None = None, callback=None,
                         differences: str = "central", gradient_at_theta: np.ndarray | None = None) -> np.ndarray:
    """Minus the Hessian of the function whose gradient is ``gradient_function``, shape (p, p).

    Parameters
    ----------
    gradient_function : callable(theta) -> ndarray, shape (p,)
    theta : ndarray, shape (p,)
    step : float, optional
        Relative step ``h_i = step * max(1, |theta_i| / 10)``; default 1e-4 for central and
        :data:`ONE_SIDED_STEP` for one-sided differences.
    callback : callable(fraction), optional
    differences : {"central", "one-sided"}
        ``"central"``: ``(g(theta + h e_i) - g(theta - h e_i)) / 2h``, two gradients per parameter,
        error O(h^2). ``"one-sided"``: ``(g(theta + h e_i) - g(theta)) / h``, one gradient per
        parameter (plus ``g(theta)`` unless given), error O(h): with the analytic gradient (accurate
        to rounding) a step of 1e-7 keeps it near 1e-6 relative, about what the central
        differences give (Nocedal & Wright 2006, section 8.1: forward differences of a gradient, step
        near the square root of its relative accuracy).
    gradient_at_theta : ndarray, shape (p,), optional
        ``g(theta)``, for one-sided differences.

    Returns
    -------
    ndarray, shape (p, p)
        Symmetrised: ``-(H + H') / 2``.
    """
    if differences not in ("central", "one-sided"):
        raise ValueError(f"differences must be 'central' or 'one-sided', got {differences!r}")
    central = differences == "central"
    step = (1e-4 if central else ONE_SIDED_STEP) if step is None else step
    p = theta.size
    hessian = np.zeros((p, p))
    if not central and p:
        gradient_at_theta = gradient_function(theta) if gradient_at_theta is None else gradient_at_theta
    for i in range(p):
        h = step * max(1.0, abs(theta[i]) * 0.1)
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        if central:
            hessian[:, i] = (gradient_function(up) - gradient_function(down)) / (2 * h)
        else:
            hessian[:, i] = (gradient_function(up) - gradient_at_theta) / (up[i] - theta[i])
        if callback is not None:
            callback((i + 1) / p)
    return -0.5 * (hessian + hessian.T)


def covariance_from_information(information: np.ndarray, names) -> tuple:
    """Covariance on the unconstrained scale, and warnings about flat directions.

    Returns
    -------
    covariance : ndarray, shape (p, p)
    warnings : list of str
    """
    if information.size == 0:
        return np.zeros((0, 0)), []
    if not np.all(np.isfinite(information)):
        return np.full(information.shape, np.nan), ["the information matrix is not finite; no standard errors"]
    values, vectors = np.linalg.eigh(information)
    top = max(values.max(), 1e-300)
    flat = values <= FLAT_TOLERANCE * top
    warnings = []
    if np.any(values < -FLAT_TOLERANCE * top):
        warnings.append("the Hessian is not negative definite at the estimate (a saddle or an unfinished fit); "
                        "standard errors may be unreliable")
    for k in np.flatnonzero(flat):
        weights = np.abs(vectors[:, k])
        involved = [names[i] for i in np.argsort(-weights)[:3] if weights[i] > 0.2]
        warnings.append("the data cannot identify a combination of parameters (flat direction in the Hessian) "
                        f"involving: {', '.join(involved)}; consider fixing one of them or a penalised fit")
    inverse_values = np.where(flat, 0.0, 1.0 / np.where(flat, 1.0, values))
    covariance = (vectors * inverse_values) @ vectors.T
    if flat.any():
        # Parameters along a flat direction have no usable standard error.
        bad = (np.abs(vectors[:, flat]) > 0.2).any(axis=1)
        covariance[bad, :] = np.nan
        covariance[:, bad] = np.nan
    return covariance, warnings


def natural_estimates(spec: ParameterSpec, theta: np.ndarray, covariance: np.ndarray) -> list:
    """Every rate, effect, observation probability and initial probability with Wald intervals."""
    from .intervals import _wald
    from .quantities import reported_quantities

    return _wald(reported_quantities(spec)[0], theta, covariance)


def derived_estimates(spec: ParameterSpec, theta: np.ndarray, covariance: np.ndarray) -> tuple:
    """Hazard ratios, mean time in each transient stage and next-stage probabilities (covariates 0), Wald.

    Returns
    -------
    hazard_ratios : list of ParameterEstimate (exp of each effect)
    mean_time_in_stage : list of ParameterEstimate (days, ``-1 / q_rr``)
    next_stage_probabilities : list of ParameterEstimate (``q_rs / -q_rr``)
    """
    from .intervals import _wald
    from .quantities import reported_quantities

    _, hazard, mean_time, next_stage = reported_quantities(spec)
    return tuple(_wald(t, theta, covariance) for t in (hazard, mean_time, next_stage))
