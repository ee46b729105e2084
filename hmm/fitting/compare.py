"""Comparing fitted models: likelihood-ratio test for nested models, AIC/BIC differences."""

from __future__ import annotations

from dataclasses import dataclass

import scipy.stats

__all__ = ["LikelihoodRatioTest", "likelihood_ratio_test", "information_criteria_difference",
           "contact_timing_of", "TimingComparison", "timing_comparison", "SHARED_CONTACT_RATE"]

#: Name of the one free unscheduled contact rate of a model whose rates are the same in every stage.
SHARED_CONTACT_RATE = "unscheduled contact rate, same in every stage"


@dataclass(frozen=True)
class LikelihoodRatioTest:
    """``statistic = 2 (log L_general - log L_restricted)``, chi-squared with ``df`` degrees of freedom.

    The chi-squared reference (Wilks 1938) assumes the restricted model is nested in the general
    one with the restriction in the interior of the parameter space; for restrictions on the
    boundary (a rate set to zero) the p-value is conservative.
    """

    statistic: float
    df: int
    p_value: float


def likelihood_ratio_test(restricted, general) -> LikelihoodRatioTest:
    """Likelihood-ratio test of ``restricted`` against ``general`` (both :class:`FitResult`).

    Raises
    ------
    ValueError
        When ``general`` does not have more free parameters than ``restricted``.
    """
    df = int(general.n_parameters - restricted.n_parameters)
    if df <= 0:
        raise ValueError(f"the general model must have more free parameters than the restricted one "
                         f"({general.n_parameters} vs {restricted.n_parameters})")
    if general.n_cases != restricted.n_cases or general.n_contacts != restricted.n_contacts:
        raise ValueError("the two fits were made on different data")
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
