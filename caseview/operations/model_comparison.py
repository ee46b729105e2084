"""Compare two fitted model versions: AIC/BIC, nesting, likelihood-ratio test (chi-squared or bootstrap).

Refused, with the reason: a version that was entered rather than fitted, a penalised fit (its
log-likelihood is not a maximum of the likelihood), a fit whose log-likelihood is not finite, fits
made on different contacts, and a likelihood-ratio test between models that are not nested (AIC and
BIC are still given then). See :mod:`hmm.fitting.compare` for nesting and the boundary caveat.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import TYPE_CHECKING

from hmm.random_state import random_generator

from ..errors import InputError
from . import DEFAULT_SEED
from .fitting import stored_fit_failed, stored_fit_summary

if TYPE_CHECKING:
    from hmm.fitting import FitSummary

__all__ = ["VersionComparison", "compare_versions"]


@dataclass(frozen=True)
class VersionComparison:
    """The comparison of two fitted versions (``first`` and ``second`` as asked).

    Attributes
    ----------
    first, second : int
        Version IDs; ``first_summary``/``second_summary`` their :class:`hmm.fitting.FitSummary`.
    aic_difference, bic_difference : float
        Second minus first (negative favours the second).
    restricted, general : int or None
        Version IDs in the nested order (None when not nested).
    nested : bool
    not_nested_reason : str
    extra_parameters, boundary_parameters : tuple of str
    statistic : float or None
    df : int or None
    chi_squared_p_value : float or None
    bootstrap_p_value : float or None
    bootstrap_replicates : int
    seed : int
    """

    first: int
    second: int
    first_summary: FitSummary
    second_summary: FitSummary
    aic_difference: float
    bic_difference: float
    restricted: int | None
    general: int | None
    nested: bool
    not_nested_reason: str
    extra_parameters: tuple
    boundary_parameters: tuple
    statistic: float | None
    df: int | None
    chi_squared_p_value: float | None
    bootstrap_p_value: float | None
    bootstrap_replicates: int
    seed: int


def _fitted(versions: dict, vid: int):
    from ..modelfile import parse_model

    if vid not in versions:
        raise InputError(f"comparison: no model version {vid} (versions: {', '.join(map(str, versions))})")
    if stored_fit_failed(versions[vid]):   # stored by an earlier caseview, whose failed fits were saved
        raise InputError(f"comparison: model version {vid} has no log-likelihood to compare (its fit failed)")
    summary = stored_fit_summary(versions[vid])
    if summary is None:
        raise InputError(f"comparison: model version {vid} was not fitted (no log-likelihood to compare)")
    if summary.penalised:
        raise InputError(f"comparison: model version {vid} is a penalised fit; a penalised log-likelihood is not a "
                         "maximum of the likelihood, so likelihood-ratio tests and AIC/BIC do not apply (refit "
                         "without the penalty to compare)")
    if summary.log_likelihood is None:
        raise InputError(f"comparison: model version {vid} has no log-likelihood to compare (its fit failed)")
    return summary, parse_model(versions[vid].json_text, source=f"model version {vid}")


def compare_versions(ws, first: int, second: int, bootstrap: int = 0, seed: int = DEFAULT_SEED,
                     callback=None) -> VersionComparison:
    """Compare two fitted versions of ``ws``; ``bootstrap`` > 0 adds a parametric-bootstrap p-value."""
    from hmm.fitting.compare import bootstrap_p_value, information_criteria_difference, likelihood_ratio_test, nesting

    if bootstrap < 0:
        raise InputError(f"bootstrap replicates: expected a whole number >= 0, got {bootstrap}")
    versions = {v.id: v for v in ws.model_versions()}
    (a, model_a), (b, model_b) = _fitted(versions, first), _fitted(versions, second)
    if (a.n_cases, a.n_contacts, a.contacts_as_of) != (b.n_cases, b.n_contacts, b.contacts_as_of):
        raise InputError(f"comparison: versions {first} and {second} were fitted to different contacts "
                         f"({a.n_cases} cases / {a.n_contacts} contacts vs {b.n_cases} / {b.n_contacts}); "
                         "refit both to the same contacts")
    diff = information_criteria_difference(a, b)
    (low_id, low, low_model), (high_id, high, high_model) = sorted(
        [(first, a, model_a), (second, b, model_b)], key=lambda item: item[1].n_parameters)
    nest = nesting(low_model, high_model, low.free_parameters, high.free_parameters)
    statistic = df = p_chi = p_boot = None
    if nest.nested:
        test = likelihood_ratio_test(low, high)
        statistic, df, p_chi = test.statistic, test.df, test.p_value
        if bootstrap:
            as_of = None if low.contacts_as_of is None else dt.date.fromisoformat(low.contacts_as_of)
            from ..dates import to_day

            caseload = ws.load_caseload(low_model, as_of_day=None if as_of is None else to_day(as_of))
            p_boot, _ = bootstrap_p_value(low_model, high_model, caseload.timelines, statistic, bootstrap,
                                          random_generator(seed), callback=callback)
    elif bootstrap:
        raise InputError(f"bootstrap p-value: versions {first} and {second} are not nested ({nest.reason}); a "
                         "likelihood-ratio test does not apply")
    return VersionComparison(first, second, a, b, diff["aic"], diff["bic"],
                             low_id if nest.nested else None, high_id if nest.nested else None, nest.nested,
                             nest.reason, nest.extra, nest.boundary, statistic, df, p_chi, p_boot, bootstrap, seed)
