"""95% intervals for every reported quantity: profile likelihood or Wald, with honest flags.

Which kind (:func:`choose_interval_kind`): ``"profile"`` or ``"wald"`` when asked; by default
profile-likelihood intervals (:mod:`hmm.fitting.profile`) when the caseload has fewer than
:data:`PROFILE_BELOW_CASES` cases or the observed information is ill-conditioned, else Wald
(delta-method on the link scale, :mod:`hmm.fitting.uncertainty`). On the demo's model structure
with 400-1000 cases Wald intervals covered the truth only about 77% of the time (issue 13), because
the log-likelihood is far from quadratic for rates and effects a few hundred cases barely inform.
Next-stage probabilities keep Wald intervals (labelled so) - they are reported for orientation.

Flags per quantity (:class:`~hmm.fitting.uncertainty.ParameterEstimate`):

* ``weakly_identified``: the data hardly inform the value - its link-scale standard error exceeds
  :data:`WEAK_STANDARD_ERROR` (a factor of about e^(2 x 1.96) = 50 across a 95% interval), or, with a
  profile interval, the profile stays above the threshold all the way to an optimiser bound on a
  side where the quantity has no natural limit (no upper bound on a rate or a mean time, either end
  of a log hazard ratio). Such an interval is not shown as a range.
* ``at_bound``: an interval end (or the estimate) at a natural limit (a rate or probability of 0, a
  probability of 1) or a log hazard ratio beyond :data:`LARGE_EFFECT`.

Conditioning (:func:`identification_warnings`): eigenvalues of the observed information on the
unconstrained scale (log rates, log hazard ratios, logits); a direction whose standard error
``1 / sqrt(eigenvalue)`` exceeds :data:`WEAK_STANDARD_ERROR` is weakly identified and the warning
names the parameters that load on it. This catches nearly flat directions, not only exactly flat ones.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .profile import ProfileProblem, profile_interval
from .quantities import from_link, reported_quantities, to_link
from .uncertainty import FLAT_TOLERANCE, ParameterEstimate, Z_95

__all__ = ["choose_interval_kind", "estimates_with_intervals", "identification_warnings", "effect_warnings",
           "link_scale_standard_errors",
           "PROFILE_BELOW_CASES", "WEAK_STANDARD_ERROR", "ILL_CONDITIONED", "LARGE_EFFECT"]

#: Default to profile intervals below this many cases (issue 13; Wald needs large samples).
PROFILE_BELOW_CASES = 5000
#: Link-scale standard error above which a quantity or a direction counts as weakly identified.
WEAK_STANDARD_ERROR = 1.0
#: Condition number of the observed information above which it counts as ill-conditioned.
ILL_CONDITIONED = 1e8
#: |log hazard ratio| above which an effect is reported as implausibly large: a hazard ratio over
#: e^5 = 148 (or under 1/148) almost always means one covariate group has (nearly) no such
#: transitions (separation), so the likelihood keeps rising towards the optimiser's limit of 20
#: (common practice, no source).
LARGE_EFFECT = 5.0
#: The coverage study's results (tests/fitting/test_coverage_demo.py), quoted under every fit summary with intervals.
MEASURED_COVERAGE = (
    "in a simulation study on the demo model's structure (40 caseloads of 1,000 cases) uncalibrated 95% "
    "intervals not marked weakly identified covered the true value only 88% of the time (Wald; profile "
    "intervals no better): with fewer than a few thousand cases read them as too narrow (README, Fitting the model)")
MEASURED_CALIBRATED_COVERAGE = (
    "in a simulation study on the demo model's structure (30 caseloads of 1,000 cases, 40 refits each) "
    "bootstrap-calibrated 95% profile intervals not marked weakly identified covered the true value 94% of the "
    "time (Monte Carlo standard error 1.4%; uncalibrated Wald 89% on the same caseloads); per replicate 71-100%: "
    "a caseload that settles on a different account of the stages can still be off (README, Fitting the model)")
#: Link-scale limits of a profile search for quantities that are not themselves a free parameter (a
#: coordinate's limits are the optimiser's bounds): probabilities between about 1e-10 and 1 - 1e-10,
#: mean times between 0.01 day and 10^12 days.
_LINK_LIMITS = {"logit": (-23.0, 23.0), "log": (math.log(0.01), math.log(1e12))}


def coverage_caveat(calibrated: bool = False) -> str:
    """What the coverage study measured for intervals of this kind (README, statistics section), for fit summaries."""
    return MEASURED_CALIBRATED_COVERAGE if calibrated else MEASURED_COVERAGE


def choose_interval_kind(requested: str, n_cases: int, information: np.ndarray | None) -> tuple:
    """``(kind, reason)`` with kind ``"profile"``, ``"wald"`` or ``"none"``.

    Parameters
    ----------
    requested : {"auto", "profile", "wald", "none"}
    n_cases : int
    information : ndarray, shape (p, p), or None
    """
    if requested not in ("auto", "profile", "wald", "none"):
        raise ValueError(f"intervals: expected auto, profile, wald or none, got {requested!r}")
    if requested != "auto":
        return requested, "as asked"
    if n_cases < PROFILE_BELOW_CASES:
        return "profile", f"fewer than {PROFILE_BELOW_CASES:,} cases"
    condition = condition_number(information)
    if not math.isfinite(condition) or condition > ILL_CONDITIONED:
        return "profile", "the observed information is ill-conditioned"
    return "wald", f"{n_cases:,} cases and a well-conditioned observed information"


def condition_number(information: np.ndarray | None) -> float:
    """Largest over smallest eigenvalue of the observed information (inf when not positive definite)."""
    if information is None or information.size == 0:
        return 1.0
    if not np.all(np.isfinite(information)):
        return math.inf
    values = np.linalg.eigvalsh(0.5 * (information + information.T))
    return math.inf if values[0] <= 0 else float(values[-1] / values[0])


def identification_warnings(information: np.ndarray, names) -> list:
    """Warnings for weakly identified directions of the observed information (see module docstring)."""
    if information is None or information.size == 0 or not np.all(np.isfinite(information)):
        return []
    values, vectors = np.linalg.eigh(0.5 * (information + information.T))
    out = []
    top = max(values.max(), 1e-300)
    # exactly flat directions are reported by covariance_from_information; these are the nearly flat ones
    for k in np.flatnonzero((values < 1.0 / WEAK_STANDARD_ERROR ** 2) & (values > FLAT_TOLERANCE * top)):
        weights = np.abs(vectors[:, k])
        involved = [names[i] for i in np.argsort(-weights)[:3] if weights[i] > 0.3]
        se = math.inf if values[k] <= 0 else 1.0 / math.sqrt(values[k])
        out.append(f"weakly identified: the data hardly inform a combination of {', '.join(involved)} "
                   f"(standard error {'unbounded' if not math.isfinite(se) else f'{se:.1f}'} on the log/logit "
                   f"scale, above {WEAK_STANDARD_ERROR:g}); treat these values as guesses")
    return out


def effect_warnings(spec, theta: np.ndarray) -> list:
    """Warnings for log hazard ratios beyond :data:`LARGE_EFFECT` or at the optimiser's bound."""
    out = []
    for i, (name, kind) in enumerate(zip(spec.names, spec.kinds)):
        if kind != "log_hazard_ratio":
            continue
        value = float(theta[i])
        if abs(value) >= spec.upper[i] - 1.0:
            out.append(f"{name}: log hazard ratio {value:+.1f} is at the optimiser's limit (+/-{spec.upper[i]:g}); "
                       "the data cannot bound it (usually one covariate group has no such transitions)")
        elif abs(value) > LARGE_EFFECT:
            out.append(f"{name}: log hazard ratio {value:+.1f} (hazard ratio {math.exp(value):.3g}) is beyond "
                       f"+/-{LARGE_EFFECT:g}, a {math.exp(LARGE_EFFECT):.0f}-fold difference; this usually means "
                       "one covariate group has (almost) no such transitions - do not read it as a real effect")
    return out


def _link_jacobian(table, theta) -> np.ndarray:
    """Central-difference Jacobian of the table's link-scale values, shape (n_values, p) (non-finite -> 0)."""
    p = theta.size
    jac = np.zeros((len(table), p))
    with np.errstate(invalid="ignore", divide="ignore"):
        for i in range(p):
            h = 1e-6 * max(1.0, abs(theta[i]))
            up, down = theta.copy(), theta.copy()
            up[i] += h
            down[i] -= h
            jac[:, i] = (table.linked(up) - table.linked(down)) / (2 * h)
    jac[~np.isfinite(jac)] = 0.0
    return jac


def _link_standard_error(jac_row: np.ndarray, covariance: np.ndarray) -> float | None:
    """Delta-method standard error on the link scale, ``sqrt(J C J')`` over the parameters the value
    depends on (None when that variance is not a finite non-negative number)."""
    used = np.flatnonzero(jac_row != 0)
    variance = float(jac_row[used] @ covariance[np.ix_(used, used)] @ jac_row[used])
    return math.sqrt(variance) if np.isfinite(variance) and variance >= 0 else None


def link_scale_standard_errors(spec, theta: np.ndarray, covariance: np.ndarray) -> tuple:
    """Every reported quantity on its link scale with its delta-method standard error.

    Parameters
    ----------
    spec : ParameterSpec
    theta : ndarray, shape (p,)
    covariance : ndarray, shape (p, p)

    Returns
    -------
    linked, standard_error : ndarray, shape (n_quantities,)
        In the order of :func:`~hmm.fitting.quantities.reported_quantities`; nan for fixed quantities
        and where there is no standard error.
    """
    theta = np.asarray(theta, dtype=float)
    covariance = np.asarray(covariance, dtype=float)
    linked_all, se_all = [], []
    for table in reported_quantities(spec):
        linked = np.asarray(table.linked(theta), dtype=float)
        jac = _link_jacobian(table, theta)
        se = np.full(len(table), np.nan)
        for j in range(len(table)):
            if table.fixed[j] or not np.any(jac[j] != 0) or not np.isfinite(linked[j]):
                linked[j] = np.nan
                continue
            se_link = _link_standard_error(jac[j], covariance)
            if se_link is not None:
                se[j] = se_link
        linked_all.append(linked)
        se_all.append(se)
    return np.concatenate(linked_all), np.concatenate(se_all)


def _wald(table, theta, covariance, z: float = Z_95) -> list:
    """Delta-method estimates on the link scale for one quantity table (half-width ``z`` standard errors)."""
    links = np.asarray(table.links)
    values = table.function(theta)
    linked = table.linked(theta)
    p = theta.size
    jac = _link_jacobian(table, theta)
    out = []
    for j in range(values.size):
        boundary = links[j] != "identity" and not np.isfinite(linked[j])
        fixed = bool(table.fixed[j]) or boundary or p == 0 or not np.any(jac[j] != 0)
        se = lower = upper = None
        kind, weak, note = None, False, ""
        if not fixed and covariance is not None:
            se_link = _link_standard_error(jac[j], covariance)
            if se_link is not None:
                lo, hi = from_link(np.array([linked[j] - z * se_link, linked[j] + z * se_link]),
                                   np.array([links[j]] * 2))
                v = values[j]
                scale = {"log": v, "logit": v * (1 - v), "identity": 1.0}[links[j]]
                se, lower, upper, kind = float(se_link * scale), float(lo), float(hi), "wald"
                if se_link > WEAK_STANDARD_ERROR:
                    weak, note = True, "weakly identified: the data hardly inform this value"
            else:
                weak, note = True, "weakly identified: no standard error (flat direction)"
        out.append(ParameterEstimate(table.names[j], table.kinds[j], float(values[j]), se, lower, upper, fixed,
                                     interval_kind=kind, weakly_identified=weak, note=note, stage=table.stages[j]))
    return out


def _profiled(table, problem: ProfileProblem, wald: list, callback) -> list:
    """Replace the Wald intervals of ``table`` by profile intervals (see module docstring)."""
    links = np.asarray(table.links)
    out = []
    for j, estimate in enumerate(wald):
        if callback is not None:
            callback(j / max(len(wald), 1))
        if estimate.fixed:
            out.append(estimate)
            continue
        # every free quantity is profiled, also one estimated at 0 or 1 or with a huge Wald standard error: the
        # profile then says honestly how far the data let it go ("the data allow 0", "no upper bound")
        lower_end, upper_end = profile_interval(problem, lambda th, _j=j: table.linked(th)[_j],
                                                limits=_LINK_LIMITS.get(links[j]))
        if not (lower_end.found and upper_end.found):
            reason = "; ".join(f"{side} end: {end.reason}" for side, end in (("lower", lower_end), ("upper", upper_end))
                               if not end.found)
            out.append(replace(estimate, profile_failed=reason, note=(estimate.note + "; " if estimate.note else "")
                               + "profile search failed: Wald interval shown"))
            continue
        lo, hi = from_link(np.array([lower_end.value, upper_end.value]), links[[j, j]])
        link = links[j]
        weak, at_bound, notes = False, False, []
        if lower_end.open:
            if link == "identity":
                weak = True
                notes.append("no lower bound")
            else:
                lo, at_bound = 0.0, True
                notes.append("the data allow 0")
        if upper_end.open:
            if link == "logit":
                hi, at_bound = 1.0, True
                notes.append("the data allow 1")
            else:
                weak = True
                notes.append("no upper bound")
        if link == "identity" and abs(estimate.estimate) > LARGE_EFFECT:
            at_bound = True
            notes.append(f"beyond +/-{LARGE_EFFECT:g}")
        note = ", ".join(notes)
        if weak:
            note = (note + ": " if note else "") + "weakly identified"
        reached = {(True, True): "both", (True, False): "lower", (False, True): "upper"}.get(
            (lower_end.open, upper_end.open), "")
        out.append(replace(estimate, lower=float(lo), upper=float(hi), interval_kind="profile",
                           weakly_identified=weak, at_bound=at_bound, note=note, bound_reached=reached))
    return out


def estimates_with_intervals(spec, theta: np.ndarray, covariance: np.ndarray | None, kind: str,
                             problem: ProfileProblem | None = None, callback=None, z: float = Z_95) -> dict:
    """Every reported quantity with its interval, by group.

    Parameters
    ----------
    spec : ParameterSpec
    theta : ndarray, shape (p,)
    covariance : ndarray, shape (p, p), or None
        Inverse observed information (None: no intervals).
    kind : {"profile", "wald", "none"}
    problem : ProfileProblem, optional
        Needed for ``kind="profile"``.
    callback : callable(fraction), optional
    z : float
        Half-width of Wald intervals in standard errors (1.96; a calibrated value from
        :mod:`hmm.fitting.calibration`, whose threshold ``z**2`` the ``problem`` then uses too).

    Returns
    -------
    dict
        ``parameters``, ``hazard_ratios``, ``mean_time_in_stage``, ``next_stage_probabilities``: lists
        of :class:`ParameterEstimate`.
    """
    tables = {t.group: t for t in reported_quantities(spec)}
    groups = {g: _wald(t, theta, None if kind == "none" else covariance, z) for g, t in tables.items()}
    if kind == "none":
        groups = {g: [replace(e, weakly_identified=False, note="") for e in items] for g, items in groups.items()}
    if kind == "profile" and problem is not None:
        plan = [("parameters", 0.0, 0.8), ("mean_time_in_stage", 0.8, 1.0)]
        for group, start, end in plan:
            sub = None if callback is None else (lambda f, _s=start, _e=end: callback(_s + (_e - _s) * f))
            groups[group] = _profiled(tables[group], problem, groups[group], sub)
        # hazard ratios: exp of the profiled log hazard ratios (the profile is invariant to the transformation)
        logs = [e for e in groups["parameters"] if e.kind == "log_hazard_ratio"]
        groups["hazard_ratios"] = [
            replace(h, lower=None if e.lower is None else math.exp(e.lower),
                    upper=None if e.upper is None else math.exp(e.upper), interval_kind=e.interval_kind,
                    weakly_identified=e.weakly_identified, at_bound=e.at_bound, note=e.note,
                    bound_reached=e.bound_reached, profile_failed=e.profile_failed)
            for h, e in zip(groups["hazard_ratios"], logs)]
    if callback is not None:
        callback(1.0)
    return groups
