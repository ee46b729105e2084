"""The result of a fit: the fitted model, per-start results, estimates with intervals, fit statistics.

BIC uses ``n = number of cases`` (the independent units; contacts within a case are dependent),
``BIC = -2 log L + k log(n_cases)``; AIC ``= -2 log L + 2 k`` with ``k`` free parameters.
:meth:`FitResult.to_summary` gives the :class:`~hmm.fitting.summary.FitSummary` stored with a model
version; its :meth:`~hmm.fitting.summary.FitSummary.format_table` is the terminal table.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..model import StageModel
from .calibration import IntervalCalibration
from .summary import FitIteration, FitSummary

__all__ = ["FitResult", "StartResult", "FitProgress", "DAYS_PER_YEAR"]

#: Days in a (Julian) year, for rates shown per year.
DAYS_PER_YEAR = 365.25


def _finite(value) -> float | None:
    value = float(value)
    return value if np.isfinite(value) else None


@dataclass(frozen=True)
class StartResult:
    """Where one start of the optimiser ended.

    Attributes
    ----------
    start : int
        0 = the model as given; later starts are perturbed copies.
    log_likelihood : float
        Final (penalised) log-likelihood of this start.
    converged : bool
    message : str
        The optimiser's reason for stopping.
    iterations : int
    """

    start: int
    log_likelihood: float
    converged: bool
    message: str
    iterations: int


@dataclass(frozen=True)
class FitProgress:
    """A progress report of :func:`hmm.fitting.fit_model` (for ``on_progress``).

    Attributes
    ----------
    fraction : float
        Of the whole fit, in [0, 1].
    phase : {"start", "information", "calibration", "intervals", "done"}
    start : int
        The start being optimised (phase ``"start"``).
    iteration : int
        Iterations of that start so far.
    log_likelihood : float or None
        At the latest iterate (phase ``"start"``).
    """

    fraction: float
    phase: str
    start: int = 0
    iteration: int = 0
    log_likelihood: float | None = None


@dataclass(frozen=True)
class FitResult:
    """What :func:`hmm.fitting.fit_model` returns (it never modifies its input model).

    Attributes
    ----------
    model : StageModel
        Fitted model, same structure and fixed values as the start.
    log_likelihood : float
        At the estimate (without any penalty); -inf when a case is impossible under the model.
    penalised_log_likelihood : float
        Log-likelihood + log prior (equal to ``log_likelihood`` for an unpenalised fit).
    penalised : bool
    n_parameters, n_cases, n_contacts : int
    aic, bic : float
        See the module docstring (BIC with n = number of cases).
    iterations : int
        L-BFGS-B iterations of the best start.
    n_likelihood_evaluations : int
        Likelihood evaluations over all starts, the observed information and the profile intervals.
    converged : bool
    warnings : list of str
    history : tuple of FitIteration
        Per iteration of the best start.
    starts : tuple of StartResult
    parameter_names : list of str
    parameters : list of ParameterEstimate
        Rates (per day), log hazard ratios, observation and initial probabilities.
    hazard_ratios, mean_time_in_stage, next_stage_probabilities : list of ParameterEstimate
    interval_kind : {"profile", "wald", "none"}
    interval_reason : str
    condition_number : float
        Of the observed information (nan when not computed).
    covariance : ndarray, shape (n_parameters, n_parameters)
        On the unconstrained scale (log rates, effects, logits), order ``parameter_names``.
    information : ndarray, shape (n_parameters, n_parameters)
        Observed information there (nan when not computed).
    free_vector : ndarray, shape (n_parameters,)
    calibration : IntervalCalibration or None
        How the intervals' width was calibrated by bootstrap refits (None: not calibrated).
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
    history: tuple
    starts: tuple
    parameter_names: list
    parameters: list
    hazard_ratios: list
    mean_time_in_stage: list
    next_stage_probabilities: list
    interval_kind: str
    interval_reason: str
    condition_number: float
    covariance: np.ndarray = field(repr=False)
    information: np.ndarray = field(repr=False)
    free_vector: np.ndarray = field(repr=False)
    calibration: IntervalCalibration | None = None

    @property
    def start_log_likelihoods(self) -> list:
        """Final (penalised) log-likelihood of every start."""
        return [s.log_likelihood for s in self.starts]

    def to_summary(self) -> FitSummary:
        """The :class:`FitSummary` stored with the model version (without provenance; see
        :meth:`FitSummary.with_provenance`)."""
        return FitSummary(
            log_likelihood=self.log_likelihood, penalised_log_likelihood=self.penalised_log_likelihood,
            penalised=self.penalised, n_parameters=self.n_parameters, n_cases=self.n_cases,
            n_contacts=self.n_contacts, aic=self.aic, bic=self.bic, iterations=self.iterations,
            n_likelihood_evaluations=self.n_likelihood_evaluations, converged=self.converged,
            warnings=tuple(self.warnings), start_log_likelihoods=tuple(self.start_log_likelihoods),
            free_parameters=tuple(self.parameter_names), parameters=tuple(self.parameters),
            hazard_ratios=tuple(self.hazard_ratios), mean_time_in_stage=tuple(self.mean_time_in_stage),
            next_stage_probabilities=tuple(self.next_stage_probabilities), history=tuple(self.history),
            interval_kind=self.interval_kind, interval_reason=self.interval_reason,
            condition_number=self.condition_number, calibration=self.calibration,
            unscheduled_contacts_per_year=tuple(self.unscheduled_contacts_per_year()),
            covariance=tuple(tuple(_finite(v) for v in row) for row in np.asarray(self.covariance, dtype=float)))

    def unscheduled_contacts_per_year(self) -> list:
        """The fitted unscheduled contact rates per year (365.25 days) in each stage, with intervals.

        Returns
        -------
        list of ParameterEstimate
            Kind ``"unscheduled_per_year"``; empty without an ``unscheduled_contacts`` block.
        """
        from dataclasses import replace as _replace

        def per_year(value):
            return None if value is None else float(value) * DAYS_PER_YEAR

        return [_replace(p, name=p.name.replace(" (per day)", " (per year)"), kind="unscheduled_per_year",
                         estimate=per_year(p.estimate), standard_error=per_year(p.standard_error),
                         lower=per_year(p.lower), upper=per_year(p.upper))
                for p in self.parameters if p.kind == "unscheduled_rate"]

    def format_table(self) -> str:
        """A plain-text table for a terminal: estimates with 95% intervals, then fit statistics."""
        return self.to_summary().format_table()


__all__ += ["FitIteration"]
