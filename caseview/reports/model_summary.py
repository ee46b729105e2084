"""The model part of a report: version, fit statistics and mean time in each stage.

The fit summary stored with a model version is read through :class:`hmm.fitting.FitSummary` (the one
contract every reader uses); the fitted mean times in stage come with their interval and its kind
(profile likelihood or Wald), and a weakly identified one is shown without a range.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from hmm.fitting import FitSummary

NOT_FITTED = "rates not fitted to this caseload"


@dataclass(frozen=True)
class TimeInStageRow:
    """Mean time in one stage (days) with an optional interval; ``mean`` None = absorbing."""

    stage: str
    mean: float | None
    lower: float | None = None
    upper: float | None = None
    note: str = ""


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


def as_fit_summary(fit_summary) -> FitSummary | None:
    """The one way readers here take a fit summary: a :class:`hmm.fitting.FitSummary`, or the JSON
    stored with a model version read by :meth:`FitSummary.from_dict`; None when not fitted or when
    the stored summary cannot be read (the model's own values are shown then)."""
    from hmm.fitting import FitSummary

    if not fit_summary:
        return None
    if isinstance(fit_summary, FitSummary):
        return fit_summary
    try:
        return FitSummary.from_dict(fit_summary)
    except ValueError:
        return None


def unscheduled_contacts_per_year(model, fit_summary=None) -> list:
    """Rows of unscheduled contacts per year in each stage (empty without the block).

    Fitted values and intervals come from the fit summary (a ``FitSummary`` or its stored JSON, read
    by :func:`as_fit_summary`; written by :meth:`hmm.fitting.FitResult.to_summary`); otherwise the
    model's rates (covariates 0). The window's model panel and the report both use this.
    """
    block = model.unscheduled_contacts
    if block is None:
        return []
    fit = as_fit_summary(fit_summary)
    stored = {e.name: e for e in fit.unscheduled_contacts_per_year} if fit is not None else {}
    rows = []
    for stage, rate in zip(model.stages, block.rates):
        item = stored.get(f"unscheduled contacts in {stage} (per year)")
        if item is not None and _number(item.estimate) is not None:
            rows.append(ContactRateRow(stage, float(item.estimate), _number(item.lower), _number(item.upper)))
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
    time_in_stage: list = field(default_factory=list)  # TimeInStageRow per stage
    time_in_stage_source: str = ""
    follow_up_stages: tuple = ()
    covariates: tuple = ()
    unscheduled_per_year: list = field(default_factory=list)  # ContactRateRow; empty without the block
    interval_kind: str = ""


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
    if value is None:
        return "not finite"
    number = float(value)
    if not math.isfinite(number):
        return "not finite"
    if number.is_integer() and abs(number) < 1e9:
        return f"{int(number)}"
    return f"{number:,.2f}"


def baseline_time_in_stage(model) -> list:
    """Mean time in each stage at all covariates 0: ``1 / (sum of rates out of the stage)`` days."""
    leave = -np.diag(model.generator())
    return [TimeInStageRow(stage, (1.0 / rate) if rate > 0 else None) for stage, rate in zip(model.stages, leave)]


def fitted_time_in_stage(model, fit: FitSummary) -> list | None:
    """Mean time in each stage from a fit (:class:`TimeInStageRow` per stage, model order), with its interval
    when informative (else ``note`` says why not); None when the fit reported no mean times."""
    fitted = fit.mean_time_by_stage()
    if not fitted:
        return None
    rows = []
    for row in baseline_time_in_stage(model):
        e = fitted.get(row.stage)
        if e is None:
            rows.append(row)
        elif e.interval_is_informative:
            rows.append(TimeInStageRow(row.stage, e.estimate, e.lower, e.upper, e.note))
        else:
            rows.append(TimeInStageRow(row.stage, e.estimate, None, None, e.note or "no useful interval"))
    return rows


def _statistics(fit) -> list:
    out = [("log-likelihood", format_statistic(fit.log_likelihood)), ("AIC", format_statistic(fit.aic)),
           ("BIC", format_statistic(fit.bic)), ("parameters estimated", format_statistic(fit.n_parameters)),
           ("cases", format_statistic(fit.n_cases)), ("contacts", format_statistic(fit.n_contacts)),
           ("iterations", format_statistic(fit.iterations)), ("converged", format_statistic(fit.converged)),
           ("contacts used", f"up to {fit.contacts_as_of}" if fit.contacts_as_of else "all stored")]
    if fit.penalised:
        out.append(("penalised fit", "yes"))
    if fit.fitted_from_version is not None:
        out.append(("fitted from version", str(fit.fitted_from_version)))
    weak = fit.weakly_identified
    if weak:
        out.append(("weakly identified", str(len(weak))))
    return out


def summarise_model(model, version) -> ModelSummary:
    """Build the report's model summary from a StageModel and its stored ModelVersion."""
    from hmm.fitting import FitSummary

    fit = None
    statistics, time_in_stage, source, kind = [], None, "", ""
    if version is not None and version.fit_summary:
        try:
            fit = FitSummary.from_dict(version.fit_summary)
        except ValueError as exc:
            statistics = [("fit summary", f"unreadable ({exc})")]
    if fit is not None:
        statistics = _statistics(fit)
        kind = fit.interval_kind
        time_in_stage = fitted_time_in_stage(model, fit)
        if time_in_stage:
            source = f"fitted to this caseload; {fit.interval_label()}"
    if not time_in_stage:
        time_in_stage = baseline_time_in_stage(model)
        source = ("from the fitted rates with all covariates 0" if fit
                  else f"from the model's rates with all covariates 0 ({NOT_FITTED})")
    return ModelSummary(
        name=model.name, version_id=None if version is None else version.id,
        created_utc="" if version is None else str(version.created_utc or ""),
        note="" if version is None else str(version.note or ""),
        fitted=bool(version is not None and version.fit_summary), statistics=statistics, time_in_stage=time_in_stage,
        time_in_stage_source=source, follow_up_stages=tuple(model.follow_up_stages), covariates=tuple(model.covariates),
        interval_kind=kind,
        unscheduled_per_year=unscheduled_contacts_per_year(model, fit),
    )
