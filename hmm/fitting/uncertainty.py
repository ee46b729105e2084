"""Standard errors and 95% intervals from the observed information.

* Observed information: minus the Hessian of the log-likelihood (or penalised log-likelihood) at the
  optimum, by central finite differences *of the analytic gradient* on the unconstrained scale,
  symmetrised. It is inverted by an eigen-decomposition; directions with eigenvalues below
  ``FLAT_TOLERANCE`` times the largest are treated as flat (not identified): the pseudo-inverse
  leaves them out and a warning names the parameters involved.
* Intervals: the delta method on a *link scale* - log for rates and mean times in stage, identity
  for log hazard ratios, logit for probabilities - giving ``link ± 1.96 SE`` mapped back to the
  natural scale (so intervals stay inside the allowed range). The standard error reported on the
  natural scale is the delta-method one (``SE_link * d natural / d link``).
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
    """One reported quantity on its natural scale with a 95% interval (None when not available)."""

    name: str
    kind: str
    estimate: float
    standard_error: float | None
    lower: float | None
    upper: float | None
    fixed: bool

    @property
    def interval_is_informative(self) -> bool:
        """False when the interval is missing, unbounded or so wide that its ends would only mislead.

        For rates, hazard ratios and mean times "so wide" means upper / lower above
        :data:`UNINFORMATIVE_RATIO` (four orders of magnitude; for a log hazard ratio, a width above
        its log). Probability intervals are bounded and always reported.
        """
        lower, upper = self.lower, self.upper
        if lower is None or upper is None or not (math.isfinite(lower) and math.isfinite(upper)):
            return False
        if self.kind in ("log_hazard_ratio", "unscheduled_log_rate_ratio"):
            return upper - lower <= math.log(UNINFORMATIVE_RATIO)
        if self.kind in ("rate", "hazard_ratio", "mean_time_in_stage", "unscheduled_rate",
                         "unscheduled_per_year"):
            return lower > 0 and upper / lower <= UNINFORMATIVE_RATIO
        return True

    def to_dict(self) -> dict:
        out = {k: getattr(self, k) for k in ("name", "kind", "estimate", "standard_error", "lower", "upper", "fixed")}
        out["informative"] = self.interval_is_informative
        return out


def observed_information(gradient_function, theta: np.ndarray, step: float = 1e-4, callback=None) -> np.ndarray:
    """Minus the Hessian of the function whose gradient is ``gradient_function``, shape (p, p)."""
    p = theta.size
    hessian = np.zeros((p, p))
    for i in range(p):
        h = step * max(1.0, abs(theta[i]) * 0.1)
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        hessian[:, i] = (gradient_function(up) - gradient_function(down)) / (2 * h)
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


def _links(values: np.ndarray, links: np.ndarray) -> np.ndarray:
    out = values.astype(float).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        log = links == "log"
        out[log] = np.log(values[log])
        logit = links == "logit"
        out[logit] = np.log(values[logit]) - np.log1p(-values[logit])
    return out


def _unlink(values: np.ndarray, links: np.ndarray) -> np.ndarray:
    out = values.copy()
    log = links == "log"
    logit = links == "logit"
    with np.errstate(over="ignore"):  # an unidentified parameter's interval may reach infinity: reported as such
        out[log] = np.exp(values[log])
        out[logit] = 1.0 / (1.0 + np.exp(-values[logit]))
    return out


def _delta(function, theta, covariance, names, kinds, links, fixed_mask) -> list:
    """Delta-method estimates for ``function(theta) -> values`` (shape (q,))."""
    values = function(theta)
    links = np.asarray(links)
    linked = _links(values, links)
    p = theta.size
    jac = np.zeros((values.size, p))
    with np.errstate(invalid="ignore"):
        for i in range(p):
            h = 1e-6 * max(1.0, abs(theta[i]))
            up, down = theta.copy(), theta.copy()
            up[i] += h
            down[i] -= h
            jac[:, i] = (_links(function(up), links) - _links(function(down), links)) / (2 * h)
    jac[~np.isfinite(jac)] = 0.0
    out = []
    for j in range(values.size):
        boundary = links[j] != "identity" and not np.isfinite(linked[j])
        fixed = bool(fixed_mask[j]) or boundary or (p and not np.any(jac[j] != 0)) or p == 0
        se = lower = upper = None
        if not fixed:
            used = np.flatnonzero(jac[j] != 0)
            variance = float(jac[j, used] @ covariance[np.ix_(used, used)] @ jac[j, used])
            if np.isfinite(variance) and variance >= 0:
                se_link = np.sqrt(variance)
                lo, hi = _unlink(np.array([linked[j] - Z_95 * se_link, linked[j] + Z_95 * se_link]),
                                 np.array([links[j]] * 2))
                v = values[j]
                scale = {"log": v, "logit": v * (1 - v), "identity": 1.0}[links[j]]
                se, lower, upper = float(se_link * scale), float(lo), float(hi)
        out.append(ParameterEstimate(names[j], kinds[j], float(values[j]), se, lower, upper, bool(fixed)))
    return out


def natural_estimates(spec: ParameterSpec, theta: np.ndarray, covariance: np.ndarray) -> list:
    """Every rate, effect, observation probability and initial probability with intervals."""
    m = spec.template
    names, kinds, links, fixed, picks = [], [], [], [], []
    for i, t in enumerate(m.transitions):
        names.append(f"rate {m.stages[t.source]} -> {m.stages[t.target]} (per day)")
        kinds.append("rate"), links.append("log"), fixed.append(spec.rate_slots[i] < 0)
        picks.append(("rate", i))
    for i, t in enumerate(m.transitions):
        for k, cov in enumerate(m.covariates):
            if cov in t.effects:
                names.append(f"log hazard ratio of {cov} on {m.stages[t.source]} -> {m.stages[t.target]}")
                kinds.append("log_hazard_ratio"), links.append("identity"), fixed.append(spec.effect_slots[i, k] < 0)
                picks.append(("effect", i, k))
    for c, channel in enumerate(m.channels):
        for r in range(m.n_stages):
            for k, cat in enumerate(channel.categories):
                names.append(f"{channel.name}: P({cat} | {m.stages[r]})")
                kinds.append("observation"), links.append("logit"), fixed.append(spec.emission_rows[c][r] is None)
                picks.append(("emission", c, r, k))
    for r, stage in enumerate(m.stages):
        names.append(f"initial P({stage})")
        kinds.append("initial"), links.append("logit"), fixed.append(spec.initial_row is None)
        picks.append(("initial", r))
    _add_unscheduled_estimates(spec, names, kinds, links, fixed, picks)

    def function(th):
        a = spec.arrays(th)
        out = np.empty(len(picks))
        for j, pick in enumerate(picks):
            if pick[0] == "rate":
                out[j] = a.rates[pick[1]]
            elif pick[0] == "effect":
                out[j] = a.effects[pick[1], pick[2]]
            elif pick[0] == "emission":
                out[j] = a.emissions[pick[1]][pick[2], pick[3]]
            elif pick[0] == "unscheduled_rate":
                out[j] = a.unscheduled_rates[pick[1]]
            elif pick[0] == "unscheduled_effect":
                out[j] = a.unscheduled_effects[pick[1]]
            else:
                out[j] = a.initial[pick[1]]
        return out

    return _delta(function, theta, covariance, names, kinds, links, np.array(fixed))


def _add_unscheduled_estimates(spec: ParameterSpec, names, kinds, links, fixed, picks) -> None:
    """Rows for the unscheduled contact rates (per day, log link) and their log rate ratios, if any."""
    m = spec.template
    block = m.unscheduled_contacts
    if block is None:
        return
    for r, stage in enumerate(m.stages):
        names.append(f"unscheduled contacts in {stage} (per day)")
        kinds.append("unscheduled_rate"), links.append("log"), fixed.append(spec.unscheduled_rate_slots[r] < 0)
        picks.append(("unscheduled_rate", r))
    for k, cov in enumerate(m.covariates):
        if cov in block.effects:
            names.append(f"log rate ratio of {cov} on unscheduled contacts")
            kinds.append("unscheduled_log_rate_ratio"), links.append("identity")
            fixed.append(spec.unscheduled_effect_slots[k] < 0)
            picks.append(("unscheduled_effect", k))


def derived_estimates(spec: ParameterSpec, theta: np.ndarray, covariance: np.ndarray) -> tuple:
    """Hazard ratios, mean time in each transient stage and next-stage probabilities (covariates 0).

    Returns
    -------
    hazard_ratios : list of ParameterEstimate (exp of each effect; interval exp of the effect's)
    mean_time_in_stage : list of ParameterEstimate (days, ``-1 / q_rr``)
    next_stage_probabilities : list of ParameterEstimate (``q_rs / -q_rr``)
    """
    m = spec.template
    natural = natural_estimates(spec, theta, covariance)
    hazard = []
    for est in natural:
        if est.kind == "log_hazard_ratio":
            hazard.append(ParameterEstimate(
                est.name.replace("log hazard ratio", "hazard ratio"), "hazard_ratio", float(np.exp(est.estimate)),
                None if est.standard_error is None else float(np.exp(est.estimate) * est.standard_error),
                None if est.lower is None else float(np.exp(est.lower)),
                None if est.upper is None else float(np.exp(est.upper)), est.fixed))
    src = np.array([t.source for t in m.transitions], dtype=np.int64)
    transient = sorted(set(src.tolist()))
    fixed_rates = spec.rate_slots < 0

    def sojourn(th):
        rates = spec.arrays(th).rates
        return np.array([1.0 / rates[src == r].sum() for r in transient])

    mean_time = _delta(sojourn, theta, covariance, [f"mean time in {m.stages[r]} (days)" for r in transient],
                       ["mean_time_in_stage"] * len(transient), ["log"] * len(transient),
                       np.array([fixed_rates[src == r].all() for r in transient]))
    pairs = [(i, t.source, t.target) for i, t in enumerate(m.transitions)]

    def next_stage(th):
        rates = spec.arrays(th).rates
        return np.array([rates[i] / rates[src == r].sum() for i, r, _ in pairs])

    nxt = _delta(next_stage, theta, covariance,
                 [f"next stage after {m.stages[r]} is {m.stages[s]}" for _, r, s in pairs],
                 ["next_stage_probability"] * len(pairs), ["logit"] * len(pairs),
                 np.array([fixed_rates[src == r].all() for _, r, _ in pairs]))
    return hazard, mean_time, nxt
