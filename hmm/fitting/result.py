"""The result of a fit: estimates with intervals, fit statistics, and readable/JSON forms.

BIC uses ``n = number of cases`` (the independent units; contacts within a case are dependent),
``BIC = -2 log L + k log(n_cases)``; AIC ``= -2 log L + 2 k`` with ``k`` free parameters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..model import StageModel

__all__ = ["FitResult"]


def _number(value):
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class FitResult:
    """What :func:`hmm.fitting.fit_model` returns (it never modifies its input model).

    Attributes
    ----------
    model : StageModel
        Fitted model, same structure and fixed values as the start.
    log_likelihood : float
        At the estimate (without any penalty).
    penalised_log_likelihood : float
        Log-likelihood + log prior (equal to ``log_likelihood`` for an unpenalised fit).
    n_parameters, n_cases, n_contacts : int
    aic, bic : float
        See the module docstring (BIC with n = number of cases).
    iterations : int
        L-BFGS-B iterations of the best start.
    n_likelihood_evaluations : int
        Likelihood+gradient evaluations over all starts and the Hessian.
    converged : bool
    warnings : list of str
    history : list of dict
        Per iteration of the best start: ``iteration``, ``log_likelihood``, ``gradient_norm``.
    start_log_likelihoods : list of float
        Final (penalised) log-likelihood of every start.
    parameters : list of ParameterEstimate
        Rates (per day), log hazard ratios, observation and initial probabilities.
    hazard_ratios, mean_time_in_stage, next_stage_probabilities : list of ParameterEstimate
    covariance : ndarray, shape (n_parameters, n_parameters)
        On the unconstrained scale (log rates, effects, logits), order ``parameter_names``.
    free_vector : ndarray, shape (n_parameters,)
    """

    model: StageModel
    log_likelihood: float
    penalised_log_likelihood: float
    penalised: bool
    n_parameters: int
    n_cases: int
    n_contacts: int
    aic: float
    bic: float
    iterations: int
    n_likelihood_evaluations: int
    converged: bool
    warnings: list
    history: list
    start_log_likelihoods: list
    parameter_names: list
    parameters: list
    hazard_ratios: list
    mean_time_in_stage: list
    next_stage_probabilities: list
    covariance: np.ndarray = field(repr=False)
    free_vector: np.ndarray = field(repr=False)

    def to_summary(self) -> dict:
        """JSON-serialisable summary (stored with the model version as ``fit_summary``)."""
        def rows(items):
            return [{k: (_number(v) if isinstance(v, (float, int, np.floating)) and not isinstance(v, bool) else v)
                     for k, v in p.to_dict().items()} for p in items]
        return {
            "log_likelihood": _number(self.log_likelihood),
            "penalised_log_likelihood": _number(self.penalised_log_likelihood),
            "penalised": self.penalised,
            "n_parameters": self.n_parameters, "n_cases": self.n_cases, "n_contacts": self.n_contacts,
            "aic": _number(self.aic), "bic": _number(self.bic), "bic_n": "cases",
            "iterations": self.iterations, "n_likelihood_evaluations": self.n_likelihood_evaluations,
            "converged": self.converged, "warnings": list(self.warnings),
            "start_log_likelihoods": [_number(v) for v in self.start_log_likelihoods],
            "free_parameters": list(self.parameter_names),
            "parameters": rows(self.parameters), "hazard_ratios": rows(self.hazard_ratios),
            "mean_time_in_stage": rows(self.mean_time_in_stage),
            "next_stage_probabilities": rows(self.next_stage_probabilities),
            "history": [{k: _number(v) if k != "iteration" else v for k, v in h.items()} for h in self.history],
            # unconstrained scale, order free_parameters; the outlook draws parameters from it
            "covariance": [[_number(v) for v in row] for row in np.asarray(self.covariance)],
        }

    def format_table(self) -> str:
        """A plain-text table for a terminal: estimates with 95% intervals, then fit statistics."""
        lines = []

        def section(title, items, fmt):
            if not items:
                return
            lines.append("")
            lines.append(title)
            width = max(len(p.name) for p in items)
            for p in items:
                if p.fixed:
                    interval = "(fixed)"
                elif p.lower is None:
                    interval = "(no interval)"
                elif not p.interval_is_informative:
                    interval = "(no useful interval: the data hardly inform this value)"
                else:
                    interval = f"[{fmt(p.lower)}, {fmt(p.upper)}]"
                lines.append(f"  {p.name:<{width}}  {fmt(p.estimate):>10}  {interval}")

        days = lambda v: f"{v:,.0f}" if abs(v) >= 100 else f"{v:.1f}"   # noqa: E731
        section("Mean time in stage (days, covariates at 0), estimate [95% interval]", self.mean_time_in_stage, days)
        section("Next stage probabilities", self.next_stage_probabilities, lambda v: f"{v:.3f}")
        section("Hazard ratios", self.hazard_ratios, lambda v: f"{v:.3f}")
        section("Observation probabilities", [p for p in self.parameters if p.kind == "observation"],
                lambda v: f"{v:.3f}")
        section("Initial stage distribution", [p for p in self.parameters if p.kind == "initial"],
                lambda v: f"{v:.3f}")
        lines.append("")
        lines.append(f"log-likelihood      {self.log_likelihood:,.2f}")
        if self.penalised:
            lines.append(f"penalised log-lik.  {self.penalised_log_likelihood:,.2f}  (penalised fit)")
        lines.append(f"free parameters     {self.n_parameters}")
        lines.append(f"AIC                 {self.aic:,.2f}")
        lines.append(f"BIC                 {self.bic:,.2f}  (n = {self.n_cases} cases)")
        lines.append(f"cases / contacts    {self.n_cases} / {self.n_contacts}")
        lines.append(f"iterations          {self.iterations}  ({self.n_likelihood_evaluations} likelihood evaluations)")
        lines.append(f"converged           {'yes' if self.converged else 'NO'}")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines).lstrip("\n")
