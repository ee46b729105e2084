"""The fit summary: the one typed record of a fit that is stored with a model version and read back.

:meth:`FitSummary.to_dict` writes plain JSON (format version :data:`SUMMARY_FORMAT_VERSION`);
:meth:`FitSummary.from_dict` reads it back, and also reads summaries stored before the format had a
version (written by ``FitResult.to_summary()`` as a dict: those intervals were all Wald intervals).
Every reader (command line, model panel, report) goes through this class; none guesses key names.

A log-likelihood that is not finite (a case impossible under the model) is stored as ``null`` and
read as None; so are AIC and BIC then.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

from .calibration import IntervalCalibration
from .uncertainty import ParameterEstimate

__all__ = ["FitSummary", "FitIteration", "SUMMARY_FORMAT_VERSION", "format_summary_table"]

SUMMARY_FORMAT_VERSION = 2


def _number(value) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class FitIteration:
    """One optimiser iteration of the best start: log-likelihood and gradient norm there."""

    iteration: int
    log_likelihood: float | None
    gradient_norm: float | None


@dataclass(frozen=True)
class FitSummary:
    """What a fit found, in the form stored with a model version.

    Attributes
    ----------
    log_likelihood : float or None
        At the estimate, without any penalty (None: not finite).
    penalised_log_likelihood : float or None
        Log-likelihood + log prior (equal to ``log_likelihood`` for a plain fit).
    penalised : bool
        A penalised (maximum a posteriori) fit: its log-likelihood is not a maximum of the likelihood.
    n_parameters, n_cases, n_contacts : int
    aic, bic : float or None
        ``-2 log L + 2 k`` and ``-2 log L + k log(n_cases)``.
    iterations, n_likelihood_evaluations : int
    converged : bool
    warnings : tuple of str
    start_log_likelihoods : tuple of (float or None)
        Final (penalised) log-likelihood of every start.
    free_parameters : tuple of str
        Names of the free parameters (the nesting check of ``models --compare`` uses them).
    parameters, hazard_ratios, mean_time_in_stage, next_stage_probabilities : tuple of ParameterEstimate
    history : tuple of FitIteration
    interval_kind : {"profile", "wald", "none"}
        How the intervals of rates, hazard ratios, mean times and observation probabilities were found
        (next-stage probabilities are always Wald; each estimate carries its own kind).
    interval_reason : str
        Why that kind (``"fewer than 5,000 cases"``, ``"as asked"``, ...).
    condition_number : float or None
        Of the observed information (None: not computed or not finite).
    contacts_as_of : str or None
        ISO date: the fit used contacts up to and including it; None: every stored contact.
    fitted_from_version : int or None
        The model version the fit started from.
    calibration : IntervalCalibration or None
        The bootstrap calibration of the intervals' width (:mod:`hmm.fitting.calibration`); None: the
        intervals use the chi-squared(1) / normal 95% points.
    covariance : tuple of tuple of (float or None), or None
        Inverse observed information on the unconstrained scale, order ``free_parameters`` (None when
        not computed; non-finite entries None). The outlook draws parameters from it.
    format_version : int
    """

    log_likelihood: float | None
    penalised_log_likelihood: float | None
    penalised: bool
    n_parameters: int
    n_cases: int
    n_contacts: int
    aic: float | None
    bic: float | None
    iterations: int
    n_likelihood_evaluations: int
    converged: bool
    warnings: tuple = ()
    start_log_likelihoods: tuple = ()
    free_parameters: tuple = ()
    parameters: tuple = ()
    hazard_ratios: tuple = ()
    mean_time_in_stage: tuple = ()
    next_stage_probabilities: tuple = ()
    history: tuple = ()
    interval_kind: str = "wald"
    interval_reason: str = ""
    condition_number: float | None = None
    contacts_as_of: str | None = None
    fitted_from_version: int | None = None
    covariance: tuple | None = None
    unscheduled_contacts_per_year: tuple = ()
    calibration: IntervalCalibration | None = None
    format_version: int = field(default=SUMMARY_FORMAT_VERSION)

    # ------------------------------------------------------------ reading
    @property
    def all_estimates(self) -> tuple:
        return self.parameters + self.hazard_ratios + self.mean_time_in_stage + self.next_stage_probabilities

    @property
    def weakly_identified(self) -> tuple:
        """Names of the estimated quantities flagged weakly identified."""
        return tuple(e.name for e in self.all_estimates if e.weakly_identified and not e.fixed)

    @property
    def profile_fallbacks(self) -> tuple:
        """Names of the quantities whose profile search failed (a Wald interval is shown, labelled so)."""
        return tuple(e.name for e in self.all_estimates if e.profile_failed and not e.fixed)

    @property
    def one_sided(self) -> tuple:
        """Names of the quantities whose profile interval reached a limit (one-sided there)."""
        return tuple(e.name for e in self.all_estimates if e.bound_reached and not e.fixed)

    @property
    def at_bound(self) -> tuple:
        return tuple(e.name for e in self.all_estimates if e.at_bound and not e.fixed)

    def mean_time_by_stage(self) -> dict:
        """Stage name -> :class:`ParameterEstimate` of its mean time in stage."""
        return {e.stage: e for e in self.mean_time_in_stage if e.stage is not None}

    @property
    def log_likelihood_is_finite(self) -> bool:
        return self.log_likelihood is not None

    def with_provenance(self, contacts_as_of: str | None, fitted_from_version: int | None) -> "FitSummary":
        """A copy recording which contacts were used and which version the fit started from."""
        return replace(self, contacts_as_of=contacts_as_of, fitted_from_version=fitted_from_version)

    def interval_label(self) -> str:
        """One line for readers: which intervals are shown."""
        label = {"profile": "95% profile-likelihood intervals", "wald": "95% Wald (delta-method) intervals",
                 "none": "no intervals"}.get(self.interval_kind, f"{self.interval_kind} intervals")
        penalty = " of the penalised log-likelihood" if self.penalised and self.interval_kind == "profile" else ""
        reason = f" ({self.interval_reason})" if self.interval_reason else ""
        tail = "; next-stage probabilities: Wald" if self.interval_kind == "profile" else ""
        calibrated = "" if self.calibration is None else (
            f", widths calibrated by {self.calibration.used} bootstrap refits (x{self.calibration.multiplier:.2f})")
        return f"{label}{penalty}{calibrated}{reason}{tail}"

    def interval_caveat(self) -> str:
        """What the coverage study measured for intervals like these ("" without intervals)."""
        if self.interval_kind not in ("profile", "wald"):
            return ""
        from .intervals import coverage_caveat

        return coverage_caveat(self.calibration is not None)

    def format_table(self) -> str:
        """A plain-text table for a terminal (see :func:`format_summary_table`)."""
        return format_summary_table(self)

    # ------------------------------------------------------------ JSON
    def to_dict(self) -> dict:
        """Plain JSON types only (non-finite numbers become null)."""
        def rows(items):
            out = []
            for e in items:
                d = e.to_dict()
                for k in ("estimate", "standard_error", "lower", "upper"):
                    d[k] = _number(d[k])
                out.append(d)
            return out

        return {
            "format_version": SUMMARY_FORMAT_VERSION,
            "log_likelihood": _number(self.log_likelihood),
            "penalised_log_likelihood": _number(self.penalised_log_likelihood),
            "penalised": bool(self.penalised),
            "n_parameters": int(self.n_parameters), "n_cases": int(self.n_cases), "n_contacts": int(self.n_contacts),
            "aic": _number(self.aic), "bic": _number(self.bic), "bic_n": "cases",
            "iterations": int(self.iterations), "n_likelihood_evaluations": int(self.n_likelihood_evaluations),
            "converged": bool(self.converged), "warnings": list(self.warnings),
            "start_log_likelihoods": [_number(v) for v in self.start_log_likelihoods],
            "free_parameters": list(self.free_parameters),
            "parameters": rows(self.parameters), "hazard_ratios": rows(self.hazard_ratios),
            "mean_time_in_stage": rows(self.mean_time_in_stage),
            "next_stage_probabilities": rows(self.next_stage_probabilities),
            "history": [{"iteration": h.iteration, "log_likelihood": _number(h.log_likelihood),
                         "gradient_norm": _number(h.gradient_norm)} for h in self.history],
            "interval_kind": self.interval_kind, "interval_reason": self.interval_reason,
            "condition_number": _number(self.condition_number),
            "contacts_as_of": self.contacts_as_of, "fitted_from_version": self.fitted_from_version,
            # unconstrained scale, order free_parameters; the outlook draws parameters from it
            "covariance": None if self.covariance is None else [[_number(v) for v in row] for row in self.covariance],
            "unscheduled_contacts_per_year": rows(self.unscheduled_contacts_per_year),
            "calibration": None if self.calibration is None else self.calibration.to_dict(),
        }

    @classmethod
    def from_dict(cls, data: dict) -> "FitSummary":
        """Read :meth:`to_dict` output or a summary stored before format versions existed.

        Raises
        ------
        ValueError
            When ``data`` is not a fit summary (names the first missing or unreadable entry).
        """
        if not isinstance(data, dict):
            raise ValueError(f"a fit summary must be a JSON object, got {type(data).__name__}")
        version = data.get("format_version", 1)
        if not isinstance(version, int) or version < 1 or version > SUMMARY_FORMAT_VERSION:
            raise ValueError(f"fit summary format_version {version!r} is not one this version of caseview reads "
                             f"(1 to {SUMMARY_FORMAT_VERSION})")
        for key in ("log_likelihood", "n_parameters", "n_cases", "converged"):
            if key not in data:
                raise ValueError(f"fit summary has no {key!r}")
        try:
            def estimates(key):
                return tuple(ParameterEstimate.from_dict(row) for row in data.get(key) or ())

            parameters = estimates("parameters")
            kinds = {e.interval_kind for e in parameters if e.interval_kind}
            legacy_kind = "wald" if kinds else "none"
            return cls(
                log_likelihood=_number(data["log_likelihood"]),
                penalised_log_likelihood=_number(data.get("penalised_log_likelihood", data["log_likelihood"])),
                penalised=bool(data.get("penalised", False)),
                n_parameters=int(data["n_parameters"]), n_cases=int(data["n_cases"]),
                n_contacts=int(data.get("n_contacts") or 0),
                aic=_number(data.get("aic")), bic=_number(data.get("bic")),
                iterations=int(data.get("iterations") or 0),
                n_likelihood_evaluations=int(data.get("n_likelihood_evaluations") or 0),
                converged=bool(data["converged"]), warnings=tuple(str(w) for w in data.get("warnings") or ()),
                start_log_likelihoods=tuple(_number(v) for v in data.get("start_log_likelihoods") or ()),
                free_parameters=tuple(str(n) for n in data.get("free_parameters") or ()),
                parameters=parameters, hazard_ratios=estimates("hazard_ratios"),
                mean_time_in_stage=estimates("mean_time_in_stage"),
                next_stage_probabilities=estimates("next_stage_probabilities"),
                history=tuple(FitIteration(int(h["iteration"]), _number(h.get("log_likelihood")),
                                           _number(h.get("gradient_norm"))) for h in data.get("history") or ()),
                interval_kind=str(data.get("interval_kind") or legacy_kind),
                interval_reason=str(data.get("interval_reason") or ("" if version > 1 else "stored before profile "
                                                                    "intervals existed")),
                condition_number=_number(data.get("condition_number")),
                contacts_as_of=data.get("contacts_as_of"),
                fitted_from_version=None if data.get("fitted_from_version") is None
                else int(data["fitted_from_version"]),
                covariance=None if data.get("covariance") is None
                else tuple(tuple(_number(v) for v in row) for row in data["covariance"]),
                unscheduled_contacts_per_year=estimates("unscheduled_contacts_per_year"),
                calibration=None if data.get("calibration") is None
                else IntervalCalibration.from_dict(data["calibration"]),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"fit summary is not readable ({type(exc).__name__}: {exc})") from None


def format_summary_table(summary: FitSummary) -> str:
    """A plain-text table for a terminal: estimates with 95% intervals and their kind, then statistics."""
    lines = [f"Intervals: {summary.interval_label()}."]

    def section(title, items, fmt):
        if not items:
            return
        lines.append("")
        lines.append(title)
        width = max(len(p.name) for p in items)
        for p in items:
            lines.append(f"  {p.name:<{width}}  {fmt(p.estimate):>10}  {p.interval_text(fmt)}")

    def days(v):
        return f"{v:,.0f}" if abs(v) >= 100 else f"{v:.1f}"

    def number(v, text="{:,.2f}"):
        return "not finite (a case is impossible under the model)" if v is None else text.format(v)

    section("Mean time in stage (days, covariates at 0), estimate [95% interval] kind", summary.mean_time_in_stage,
            days)
    section("Next stage probabilities", summary.next_stage_probabilities, lambda v: f"{v:.3f}")
    section("Hazard ratios", summary.hazard_ratios, lambda v: f"{v:.3f}")
    section("Observation probabilities", [p for p in summary.parameters if p.kind == "observation"],
            lambda v: f"{v:.3f}")
    section("Initial stage distribution", [p for p in summary.parameters if p.kind == "initial"],
            lambda v: f"{v:.3f}")
    section("Unscheduled contacts per year in each stage, estimate [95% interval] kind",
            summary.unscheduled_contacts_per_year, lambda v: f"{v:.2f}")
    section("Log rate ratios of unscheduled contacts",
            [p for p in summary.parameters if p.kind == "unscheduled_log_rate_ratio"], lambda v: f"{v:.3f}")
    lines.append("")
    lines.append(f"log-likelihood      {number(summary.log_likelihood)}")
    if summary.penalised:
        lines.append(f"penalised log-lik.  {number(summary.penalised_log_likelihood)}  (penalised fit)")
    lines.append(f"free parameters     {summary.n_parameters}")
    lines.append(f"AIC                 {number(summary.aic)}")
    lines.append(f"BIC                 {number(summary.bic)}  (n = {summary.n_cases} cases)")
    lines.append(f"cases / contacts    {summary.n_cases} / {summary.n_contacts}"
                 + (f"  (contacts up to {summary.contacts_as_of})" if summary.contacts_as_of else "  (all contacts)"))
    lines.append(f"iterations          {summary.iterations}  ({summary.n_likelihood_evaluations} likelihood "
                 "evaluations)")
    lines.append(f"converged           {'yes' if summary.converged else 'NO'}")
    weak = summary.weakly_identified
    if weak:
        lines.append(f"weakly identified   {len(weak)}: {'; '.join(weak)}")
    failed = summary.profile_fallbacks
    if failed:
        lines.append(f"profile failed      {len(failed)}: {'; '.join(failed)} - Wald intervals shown instead, labelled "
                     "'wald (profile search failed: ...)'")
    if summary.calibration is not None:
        lines.append(f"calibration         {summary.calibration.describe()}")
    if summary.interval_caveat():
        lines.append(f"caveat: {summary.interval_caveat()}")
    for w in summary.warnings:
        lines.append(f"warning: {w}")
    return "\n".join(lines)

