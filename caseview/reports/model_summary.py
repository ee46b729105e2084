"""The model part of a report: version, fit statistics and mean time in each stage.

The fit summary stored with a model version (written by the fitting code) is read defensively:
any of the usual key spellings are accepted and anything missing is simply not shown.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

NOT_FITTED = "rates not fitted to this caseload"

_STATISTIC_KEYS = (
    ("log-likelihood", ("log_likelihood", "loglik", "logl", "log_lik", "loglikelihood")),
    ("AIC", ("aic",)),
    ("BIC", ("bic",)),
    ("parameters estimated", ("n_parameters", "n_params", "parameters", "number_of_parameters")),
    ("cases", ("n_cases", "cases")),
    ("contacts", ("n_contacts", "contacts")),
    ("iterations", ("iterations", "n_iterations")),
    ("converged", ("converged",)),
)
_SOJOURN_KEYS = ("mean_sojourn_days", "mean_sojourn", "mean_time_in_stage", "sojourn_times", "mean_sojourn_time")
_ESTIMATE_KEYS = ("estimate", "mean", "value", "days")
_LOWER_KEYS = ("lower", "low", "ci_lower", "ci_low", "lo")
_UPPER_KEYS = ("upper", "high", "ci_upper", "ci_high", "hi")


@dataclass(frozen=True)
class SojournRow:
    """Mean time in one stage (days) with an optional interval; ``mean`` None = absorbing."""

    stage: str
    mean: float | None
    lower: float | None = None
    upper: float | None = None


@dataclass(frozen=True)
class ContactRateRow:
    """Unscheduled contacts per year in one stage (the model's ``unscheduled_contacts`` block), with an
    optional 95% interval when fitted."""

    stage: str
    per_year: float
    lower: float | None = None
    upper: float | None = None


#: Days per year for rates shown per year (hmm.fitting.result.DAYS_PER_YEAR).
_DAYS_PER_YEAR = 365.25


def unscheduled_contacts_per_year(model, fit_summary: dict | None = None) -> list:
    """Rows of unscheduled contacts per year in each stage (empty without the block).

    Fitted values and intervals come from the stored fit summary (``unscheduled_contacts_per_year``,
    written by :meth:`hmm.fitting.FitResult.to_summary`); otherwise the model's rates (covariates 0).
    The window's model panel and the report both use this.
    """
    block = getattr(model, "unscheduled_contacts", None)
    if block is None:
        return []
    stored = {}
    for item in (fit_summary or {}).get("unscheduled_contacts_per_year") or []:
        stored[item.get("name", "")] = item
    rows = []
    for stage, rate in zip(model.stages, block.rates):
        item = stored.get(f"unscheduled contacts in {stage} (per year)")
        if item is not None and _number(item.get("estimate")) is not None:
            rows.append(ContactRateRow(stage, float(item["estimate"]), _number(item.get("lower")),
                                       _number(item.get("upper"))))
        else:
            rows.append(ContactRateRow(stage, float(rate) * _DAYS_PER_YEAR))
    return rows


@dataclass(frozen=True)
class ModelSummary:
    name: str
    version_id: int | None
    created_utc: str
    note: str
    fitted: bool
    statistics: list = field(default_factory=list)     # (label, text)
    sojourn: list = field(default_factory=list)        # SojournRow
    sojourn_source: str = ""
    follow_up_stages: tuple = ()
    covariates: tuple = ()
    unscheduled_per_year: list = field(default_factory=list)  # ContactRateRow; empty without the block


def _lower_keys(mapping) -> dict:
    return {str(k).lower(): v for k, v in mapping.items()} if isinstance(mapping, dict) else {}


def _pick(mapping: dict, keys):
    for key in keys:
        if key in mapping and mapping[key] is not None:
            return mapping[key]
    return None


def _number(value) -> float | None:
    if isinstance(value, bool) or value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def format_statistic(value) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    number = _number(value)
    if number is None:
        return str(value)
    if float(number).is_integer() and abs(number) < 1e9:
        return f"{int(number)}"
    return f"{number:,.2f}"


def baseline_sojourn(model) -> list:
    """Mean time in each stage at all covariates 0: ``1 / (sum of rates out of the stage)`` days."""
    leave = -np.diag(model.generator())
    return [SojournRow(stage, (1.0 / rate) if rate > 0 else None) for stage, rate in zip(model.stages, leave)]


def _fitted_sojourn(model, summary: dict) -> list | None:
    raw = _pick(summary, _SOJOURN_KEYS)
    if not isinstance(raw, dict):
        return None
    rows = []
    for stage in model.stages:
        item = raw.get(stage)
        if isinstance(item, dict):
            item = _lower_keys(item)
            mean, lower, upper = (_number(_pick(item, keys)) for keys in (_ESTIMATE_KEYS, _LOWER_KEYS, _UPPER_KEYS))
            interval = _pick(item, ("interval", "ci", "confidence_interval"))
            if lower is None and isinstance(interval, (list, tuple)) and len(interval) == 2:
                lower, upper = _number(interval[0]), _number(interval[1])
            if item.get("informative") is False:   # too wide to mean anything (hmm.fitting.ParameterEstimate)
                lower = upper = None
        elif isinstance(item, (list, tuple)) and item:
            values = [_number(v) for v in item] + [None, None]
            mean, lower, upper = values[0], values[1], values[2]
        else:
            mean, lower, upper = _number(item), None, None
        rows.append(SojournRow(stage, mean, lower, upper))
    return rows if any(r.mean is not None for r in rows) else None


def summarise_model(model, version) -> ModelSummary:
    """Build the report's model summary from a StageModel and its stored ModelVersion."""
    fit = getattr(version, "fit_summary", None)
    fit = _lower_keys(fit) if isinstance(fit, dict) and fit else None
    statistics = []
    sojourn, source = None, ""
    if fit:
        for label, keys in _STATISTIC_KEYS:
            value = _pick(fit, keys)
            if value is not None and not isinstance(value, (dict, list)):
                statistics.append((label, format_statistic(value)))
        sojourn = _fitted_sojourn(model, fit)
        if sojourn:
            source = "fitted to this caseload; interval as stored with the fit"
    if not sojourn:
        sojourn = baseline_sojourn(model)
        source = ("from the fitted rates with all covariates 0" if fit
                  else f"from the model's rates with all covariates 0 ({NOT_FITTED})")
    return ModelSummary(
        name=model.name, version_id=getattr(version, "id", None),
        created_utc=str(getattr(version, "created_utc", "") or ""), note=str(getattr(version, "note", "") or ""),
        fitted=bool(fit), statistics=statistics, sojourn=sojourn, sojourn_source=source,
        follow_up_stages=tuple(model.follow_up_stages), covariates=tuple(model.covariates),
        unscheduled_per_year=unscheduled_contacts_per_year(model, getattr(version, "fit_summary", None)),
    )
