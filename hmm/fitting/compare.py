"""Comparing fitted models: likelihood-ratio test for nested models, AIC/BIC differences."""

from __future__ import annotations

from dataclasses import dataclass

import scipy.stats

__all__ = ["LikelihoodRatioTest", "likelihood_ratio_test", "information_criteria_difference"]


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
