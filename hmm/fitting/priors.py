"""Weakly informative priors for a penalised (maximum a posteriori) fit of a small caseload.

Defaults (``Prior()``), chosen to be weak relative to a few hundred cases yet to keep estimates
off the boundaries where the likelihood is flat:

* log baseline rate per day ~ Normal(log(1/365), sd 2): a typical stay of a year, with 95% of the
  prior mass between about 7 days and 50 years (365 * exp(-/+ 1.96 * 2) days);
* log hazard ratio ~ Normal(0, sd 2): hazard ratios between about 1/50 and 50;
* with an ``unscheduled_contacts`` block: log unscheduled contact rate per day ~ Normal(log(2/365),
  sd 2) (two a year, 95% between about one in 25 years and 100 a year) and each log rate ratio
  ~ Normal(0, sd 2);
* each observation-probability row and the initial distribution ~ Dirichlet with every
  concentration 1.5 (a mild pull away from 0 and 1; 1 would be flat).

The penalty is the log prior density up to an additive constant, expressed in the unconstrained
parameters. The Dirichlet density is taken on the probability scale (the softmax Jacobian is not
added), so the mode is the usual MAP estimate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .parameters import ParameterSpec

__all__ = ["Prior"]


@dataclass(frozen=True)
class Prior:
    """Prior settings; see the module docstring for the defaults and their meaning."""

    log_rate_mean: float = float(np.log(1.0 / 365.0))
    log_rate_sd: float = 2.0
    effect_mean: float = 0.0
    effect_sd: float = 2.0
    concentration: float = 1.5
    log_contact_rate_mean: float = float(np.log(2.0 / 365.0))
    log_contact_rate_sd: float = 2.0

    def log_density_and_gradient(self, theta: np.ndarray, spec: ParameterSpec) -> tuple:
        """Log prior (up to a constant) and its gradient, shapes () and (n_free,)."""
        theta = np.asarray(theta, dtype=float)
        grad = np.zeros_like(theta)
        value = 0.0
        kinds = np.array(spec.kinds)
        for kind, mean, sd in (("rate", self.log_rate_mean, self.log_rate_sd),
                               ("log_hazard_ratio", self.effect_mean, self.effect_sd),
                               ("unscheduled_rate", self.log_contact_rate_mean, self.log_contact_rate_sd),
                               ("unscheduled_log_rate_ratio", self.effect_mean, self.effect_sd)):
            idx = np.flatnonzero(kinds == kind)
            z = (theta[idx] - mean) / sd
            value -= 0.5 * float(np.sum(z * z))
            grad[idx] -= z / sd
        weight = self.concentration - 1.0
        if weight != 0.0:
            rows = [r for channel_rows in spec.emission_rows for r in channel_rows if r is not None]
            if spec.initial_row is not None:
                rows.append(spec.initial_row)
            for row in rows:
                # log p_k = z_k - logsumexp(z over the support), reference logit 0
                z = np.concatenate([[0.0], theta[row.slots]])
                top = z.max()
                lse = top + np.log(np.exp(z - top).sum())
                p = np.exp(z - lse)
                value += weight * float(np.sum(z - lse))
                grad[row.slots] += weight * (1.0 - z.size * p[1:])
        return value, grad
