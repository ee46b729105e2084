"""Comparing fitted models: nesting, likelihood-ratio test (chi-squared or parametric bootstrap), AIC/BIC.

* Nesting (:func:`nesting`): the restricted model is nested in the general one when both have the same
  stages, channels (with categories) and covariates, and every free parameter of the restricted model
  is free in the general one; the general model's extra free parameters are held at a value in the
  restricted one. A restriction that holds a rate at 0 (a transition the restricted model does not
  have) or a probability at 0 (a structural zero) puts the parameter on the *boundary* of its space.
* The chi-squared reference (Wilks 1938) assumes the restriction is in the interior. On the boundary
  the null distribution of the LR statistic is a mixture of chi-squared distributions
  (chi-bar-squared; Self & Liang 1987, JASA 82:605-610), and the chi-squared p-value is conservative
  (too large); :func:`bootstrap_p_value` gives a parametric-bootstrap p-value instead.
* A penalised fit's log-likelihood is not a maximum of the likelihood, so the LR statistic between
  penalised fits has no chi-squared reference: such fits are refused.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.stats

from .parameters import parameter_spec

__all__ = ["LikelihoodRatioTest", "likelihood_ratio_test", "information_criteria_difference", "Nesting", "nesting",
           "bootstrap_p_value", "contact_timing_of", "TimingComparison", "timing_comparison",
           "SHARED_CONTACT_RATE"]

#: Name of the one free unscheduled contact rate of a model whose rates are the same in every stage.
SHARED_CONTACT_RATE = "unscheduled contact rate, same in every stage"


@dataclass(frozen=True)
class LikelihoodRatioTest:
    """``statistic = 2 (log L_general - log L_restricted)``, chi-squared with ``df`` degrees of freedom.

    The chi-squared reference (Wilks 1938) assumes the restricted model is nested in the general
    one with the restriction in the interior of the parameter space; for restrictions on the
    boundary (a rate set to zero) the p-value is conservative (see the module docstring).
    """

    statistic: float
    df: int
    p_value: float


def likelihood_ratio_test(restricted, general) -> LikelihoodRatioTest:
    """Likelihood-ratio test of ``restricted`` against ``general`` (:class:`FitResult` or :class:`FitSummary`).

    Raises
    ------
    ValueError
        When ``general`` does not have more free parameters than ``restricted``, the fits are on different
        data, either fit is penalised, or a log-likelihood is not finite.
    """
    df = int(general.n_parameters - restricted.n_parameters)
    if df <= 0:
        raise ValueError(f"the general model must have more free parameters than the restricted one "
                         f"({general.n_parameters} vs {restricted.n_parameters})")
    if general.n_cases != restricted.n_cases or general.n_contacts != restricted.n_contacts:
        raise ValueError("the two fits were made on different data")
    if general.penalised or restricted.penalised:
        raise ValueError("a penalised fit's log-likelihood is not a maximum of the likelihood, so the "
                         "likelihood-ratio statistic has no chi-squared reference; refit without the penalty")
    if general.log_likelihood is None or restricted.log_likelihood is None or \
            not np.isfinite([general.log_likelihood, restricted.log_likelihood]).all():
        raise ValueError("a log-likelihood is not finite")
    statistic = max(0.0, 2.0 * (general.log_likelihood - restricted.log_likelihood))
    return LikelihoodRatioTest(float(statistic), df, float(scipy.stats.chi2.sf(statistic, df)))


def information_criteria_difference(first, second) -> dict:
    """``second - first`` for AIC and BIC (negative means ``second`` is preferred)."""
    return {"aic": float(second.aic - first.aic), "bic": float(second.bic - first.bic)}


def contact_timing_of(model) -> str:
    """``"none"`` (no unscheduled_contacts block), ``"same_in_every_stage"`` or ``"stage_dependent"``."""
    block = model.unscheduled_contacts
    if block is None:
        return "none"
    return "same_in_every_stage" if block.same_in_every_stage else "stage_dependent"


@dataclass(frozen=True)
class TimingComparison:
    """Whether two fits can be compared when the timing of unscheduled contacts is in either model.

    Attributes
    ----------
    comparable : bool
        False when only one likelihood includes the timing term: their log-likelihoods (and AIC,
        BIC) are of different data and must not be compared.
    nested : bool
        The timing model with one rate in every stage is nested in the stage-dependent one (same
        other parameters): a likelihood-ratio test applies, with one degree of freedom per extra rate.
    explanation : str
        One or two sentences for the user saying what is compared.
    """

    comparable: bool
    nested: bool
    explanation: str


def timing_comparison(first_timing: str, second_timing: str, first_names: set, second_names: set) -> TimingComparison:
    """What comparing two fits means given their contact timing (:func:`contact_timing_of`) and free parameter names.

    Returns None-like ``TimingComparison(True, False, "")`` when neither model has the timing block.
    """
    kinds = {first_timing, second_timing}
    if kinds == {"none"}:
        return TimingComparison(True, False, "")
    if "none" in kinds:
        return TimingComparison(False, False, (
            "not comparable: one model's likelihood includes the timing of unscheduled contacts and the other's "
            "does not, so their log-likelihoods, AIC and BIC describe different things. To test whether contact "
            "timing depends on the stage, fit the timing model with \"same_in_every_stage\": true in its "
            "unscheduled_contacts block and compare that version with the stage-dependent one (nested)."))
    if kinds == {"same_in_every_stage", "stage_dependent"}:
        restricted, general = (first_names, second_names) if first_timing == "same_in_every_stage" else \
            (second_names, first_names)
        nested = (set(restricted) - {SHARED_CONTACT_RATE}) <= set(general) and len(general) > len(restricted)
        return TimingComparison(True, nested, (
            "compared: the timing model with stage-dependent unscheduled contact rates against the same model with "
            "one rate in every stage (contact timing then says nothing about the stage); both likelihoods include "
            "the timing term." + ("" if nested else " The other parameters differ, so the models are not nested.")))
    return TimingComparison(True, False, "both likelihoods include the timing of unscheduled contacts.")


@dataclass(frozen=True)
class Nesting:
    """Whether ``restricted`` is nested in ``general`` and how.

    Attributes
    ----------
    nested : bool
    reason : str
        Why not (empty when nested).
    extra : tuple of str
        Free parameters of the general model that the restricted one holds fixed.
    boundary : tuple of str
        Those among ``extra`` held at 0 (a rate or a probability): on the boundary.
    """

    nested: bool
    reason: str = ""
    extra: tuple = ()
    boundary: tuple = ()


def nesting(restricted, general) -> Nesting:
    """Is the :class:`~hmm.model.StageModel` ``restricted`` nested in ``general``? (module docstring)"""
    if tuple(restricted.stages) != tuple(general.stages):
        return Nesting(False, "the two models have different stages")
    if tuple(restricted.covariates) != tuple(general.covariates):
        return Nesting(False, "the two models have different covariates")
    if [(c.name, tuple(c.categories)) for c in restricted.channels] != \
            [(c.name, tuple(c.categories)) for c in general.channels]:
        return Nesting(False, "the two models have different observation channels or categories")
    free_r, free_g = set(parameter_spec(restricted).names), set(parameter_spec(general).names)
    only_r = sorted(free_r - free_g)
    if only_r:
        return Nesting(False, f"the first model estimates {only_r[0]!r}, which the second holds fixed or does "
                              "not have" + (f" (and {len(only_r) - 1} more)" if len(only_r) > 1 else ""))
    extra = tuple(n for n in parameter_spec(general).names if n not in free_r)
    if not extra:
        return Nesting(False, "both models estimate the same parameters")
    boundary = []
    rates = {(restricted.stages[t.source], restricted.stages[t.target]): t.rate for t in restricted.transitions}
    for name in extra:
        if name.startswith("rate "):
            source, target = name[len("rate "):].split(" -> ")
            if rates.get((source, target), 0.0) == 0.0:
                boundary.append(name)
        elif ": P(" in name:
            channel, rest = name.split(": P(", 1)
            category, stage = rest.rstrip(")").split(" | ")
            c = next(ch for ch in restricted.channels if ch.name == channel)
            if c.probabilities[restricted.stage_index(stage)][list(c.categories).index(category)] == 0.0:
                boundary.append(name)
        elif name.startswith("initial P("):
            stage = name[len("initial P("):-1]
            if restricted.initial[restricted.stage_index(stage)] == 0.0:
                boundary.append(name)
    return Nesting(True, "", extra, tuple(boundary))


def bootstrap_p_value(restricted_fit_model, general_start_model, timelines, statistic: float, replicates: int,
                      rng: np.random.Generator, callback=None) -> tuple:
    """Parametric-bootstrap p-value of the LR statistic.

    Simulates ``replicates`` caseloads from the fitted restricted model at the observed contact times
    (with each contact's covariates, the observed missing pattern and known stages; the same rule as
    the fit check's bootstrap, :func:`hmm.fitting.goodness._replicate`), refits both models to each and
    counts replicate statistics at least as large as the observed one:
    ``p = (1 + #{T* >= T}) / (B + 1)`` (Davison & Hinkley 1997, *Bootstrap Methods*, eq. 4.11).

    Parameters
    ----------
    restricted_fit_model, general_start_model : StageModel
        The fitted restricted model (simulation truth and start of its refits); the general model's
        start (its fitted values; the restriction's extra parameters start from there too).
    timelines : Timelines
        The observed caseload (contact times, covariates, missing pattern, known stages).
    statistic : float
    replicates : int
    rng : numpy.random.Generator
    callback : callable(fraction), optional

    Returns
    -------
    p_value : float
    statistics : ndarray, shape (replicates,)
    """
    from .goodness import _replicate, _schedule
    from .optimise import fit_model

    schedule = _schedule(restricted_fit_model, timelines)
    values = np.empty(replicates)
    for b in range(replicates):
        sim = _replicate(restricted_fit_model, schedule, rng)     # the fit check's simulation rule
        low = fit_model(restricted_fit_model, sim, starts=1, intervals="none")
        high = fit_model(general_start_model, sim, starts=1, intervals="none")
        values[b] = max(0.0, 2.0 * (high.log_likelihood - low.log_likelihood))
        if callback is not None:
            callback((b + 1) / replicates)
    return float((1 + np.sum(values >= statistic - 1e-9)) / (replicates + 1)), values
