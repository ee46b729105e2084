"""Fit the stage model and check its fit: the jobs both the window and the command line run.

Which contacts: every stored contact on or before an explicit as-of date, or every stored contact
when the as-of date is None (the command line's default; the window passes its as-of date and
says so). The date is recorded in the fit summary (``contacts_as_of``) and the audit entry, as is
the model version the fit started from (``fitted_from_version``).

A job is split so the window can run the slow part in a worker thread (one SQLite connection per
thread) and ask before anything changes:

* :func:`fit_inputs` reads (the model and the contacts), :func:`compute_fit` computes (no storage),
  :func:`save_fit` stores the fitted version - made current or not - audited ``model.fit``, and
  :func:`make_version_current` makes a stored version current, audited ``model.current``.
  :func:`run_fit` does all of it for the command line. :func:`preview_fit` (window) compares flags
  and P(follow-up now) before and after.
* :func:`compute_fit_check` and :func:`record_fit_check` (audited ``model.fit_check``);
  :func:`run_fit_check` does both.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from hmm.random_state import random_generator

from ..errors import InputError
from . import DEFAULT_SEED

if TYPE_CHECKING:
    from hmm import StageModel
    from hmm.fitting import FitResult, FitSummary, GoodnessOfFit

    from ..storage.caseload import Caseload

__all__ = ["FitOptions", "FitInputs", "FitOutcome", "SavedFit", "FitPreview", "FitCheckOptions", "FitCheckOutcome",
           "fit_inputs", "inputs_from_caseload", "compute_fit", "save_fit", "make_version_current", "run_fit",
           "preview_fit", "compute_fit_check", "default_calibration_draws", "record_fit_check", "run_fit_check",
           "stored_fit_summary",
           "stored_fit_failed",
           "DEFAULT_SEED"]


@dataclass(frozen=True)
class FitOptions:
    """How to fit: ``starts`` seeded from ``seed``; ``intervals`` ``auto`` | ``profile`` | ``wald``;
    ``calibration_draws`` bootstrap refits that calibrate the intervals' width (None: the default,
    :func:`default_calibration_draws`; 0: off)."""

    starts: int = 3
    seed: int = DEFAULT_SEED
    penalised: bool = False
    intervals: str = "auto"
    max_iterations: int = 500
    calibration_draws: int | None = None

    def check(self) -> None:
        if self.starts < 1:
            raise InputError(f"starts: expected a whole number >= 1, got {self.starts}")
        if self.max_iterations < 1:
            raise InputError(f"maximum iterations: expected a whole number >= 1, got {self.max_iterations}")
        if self.intervals not in ("auto", "profile", "wald"):
            raise InputError(f"intervals: expected auto, profile or wald, got {self.intervals!r}")
        if self.calibration_draws is not None and not 0 <= self.calibration_draws <= MAX_CALIBRATION_DRAWS:
            raise InputError(f"calibration draws: expected a whole number from 0 to {MAX_CALIBRATION_DRAWS}, "
                             f"got {self.calibration_draws}")

    def calibration_draws_for(self, n_cases: int) -> int:
        """The refits to calibrate with for a caseload of ``n_cases`` cases."""
        if self.calibration_draws is not None:
            return self.calibration_draws
        return default_calibration_draws(n_cases, self.penalised)


#: Largest number of calibration refits accepted (each is a whole fit of the caseload).
MAX_CALIBRATION_DRAWS = 1000


def default_calibration_draws(n_cases: int, penalised: bool = False) -> int:
    """Bootstrap refits calibrating the intervals by default: 40 below 5,000 cases (where chi-squared
    theory was measured to undercover, README "Fitting the model"), none above or for a penalised fit."""
    from hmm.fitting.calibration import CALIBRATE_BELOW_CASES, DEFAULT_CALIBRATION_DRAWS

    return DEFAULT_CALIBRATION_DRAWS if n_cases < CALIBRATE_BELOW_CASES and not penalised else 0


@dataclass(frozen=True)
class FitInputs:
    """What a fit or fit check reads: the current model, its version and the contacts used.

    Attributes
    ----------
    model : hmm.StageModel
    version_id : int or None
        None when there is no workspace (a window test's in-memory caseload).
    caseload : caseview.storage.Caseload
        Case IDs, coordinators and ``timelines`` (contacts on or before ``contacts_as_of``).
    contacts_as_of : datetime.date or None
        None: every stored contact.
    """

    model: StageModel
    version_id: int | None
    caseload: Caseload
    contacts_as_of: dt.date | None
    entered_not_fitted: bool = False

    @property
    def timelines(self):
        return self.caseload.timelines

    @property
    def contacts_text(self) -> str:
        return ("every stored contact" if self.contacts_as_of is None
                else f"contacts up to {self.contacts_as_of.isoformat()}")


@dataclass(frozen=True)
class FitOutcome:
    """A computed fit, not yet stored: the engine's result and the summary to store."""

    inputs: FitInputs
    options: FitOptions
    result: FitResult
    summary: FitSummary       # with provenance


@dataclass(frozen=True)
class SavedFit:
    """A stored fit: the new version's ID and whether it is current."""

    outcome: FitOutcome
    version_id: int
    made_current: bool
    model: StageModel | None = None      # as stored (covariate ranges seen at fit time filled in)

    @property
    def note(self) -> str:
        return fit_note(self.outcome)


def fit_inputs(ws, as_of: dt.date | None = None) -> FitInputs:
    """The current model and the contacts on or before ``as_of`` (all when None)."""
    from ..dates import to_day

    model, version = ws.current_model()
    caseload = ws.load_caseload(model, as_of_day=None if as_of is None else to_day(as_of))
    if caseload.timelines.n_cases == 0:
        raise InputError(f"{ws.path.name}: no contacts" + ("" if as_of is None else f" on or before {as_of}")
                         + " to fit or check; import timelines first")
    return FitInputs(model, version.id, caseload, as_of, entered_not_fitted=not version.fit_summary)


def inputs_from_caseload(model, caseload, as_of: dt.date | None) -> FitInputs:
    """Inputs for a caseload that is not in a workspace (the window's in-memory test caseloads)."""
    return FitInputs(model, None, caseload, as_of)


def compute_fit(inputs: FitInputs, options: FitOptions, callback=None, on_progress=None) -> FitOutcome:
    """Fit (no storage; safe in a worker thread). ``callback(fraction)`` may raise to cancel."""
    from hmm.fitting import fit_model

    from ..scoring import observation_end_day
    from .fit_guards import refuse_unscorable_cases, run_guarded

    options.check()
    refuse_unscorable_cases(inputs.caseload, inputs.model)   # the same refusal from both faces
    result = run_guarded(lambda: fit_model(
        inputs.model, inputs.timelines, starts=options.starts, rng=random_generator(options.seed),
        penalised=options.penalised, callback=callback, max_iterations=options.max_iterations,
        intervals=options.intervals, on_progress=on_progress,
        observed_until=observation_end_day(inputs.timelines),
        calibration_draws=options.calibration_draws_for(inputs.timelines.n_cases)))
    summary = result.to_summary().with_provenance(
        None if inputs.contacts_as_of is None else inputs.contacts_as_of.isoformat(), inputs.version_id)
    return FitOutcome(inputs, options, result, summary)


def fit_note(outcome: FitOutcome) -> str:
    s = outcome.summary
    return (f"fitted to {s.n_cases} cases ({outcome.inputs.contacts_text}) from version {s.fitted_from_version}"
            + (" (penalised)" if s.penalised else "") + ("" if s.converged else " - DID NOT CONVERGE"))


def save_fit(ws, outcome: FitOutcome, actor: str, make_current: bool) -> SavedFit:
    """Store the fitted model as a new version (audited ``model.fit`` with the summary and options)."""
    from ..modelfile import dump_model
    from .fit_guards import fitted_model_to_save

    if outcome.summary.log_likelihood is None:
        raise InputError("the fit failed (the log-likelihood is not finite: a case is impossible under the model); "
                         "nothing was saved")
    to_save = fitted_model_to_save(outcome.result, outcome.inputs.timelines)
    version_id = ws.add_model_version(dump_model(to_save), fit_note(outcome), actor,
                                      fit_summary=outcome.summary.to_dict(), make_current=make_current)
    return SavedFit(outcome, version_id, make_current, to_save)


def make_version_current(ws, version_id: int, actor: str) -> None:
    """Make a stored model version current for scoring (audited ``model.current``)."""
    ws.set_current_model(int(version_id), actor)


def run_fit(ws, options: FitOptions, actor: str, as_of: dt.date | None = None, make_current: bool = True,
            callback=None, on_progress=None) -> SavedFit:
    """Read, fit and store in one go (the command line)."""
    outcome = compute_fit(fit_inputs(ws, as_of), options, callback=callback, on_progress=on_progress)
    return save_fit(ws, outcome, actor, make_current)


def stored_fit_failed(version) -> bool:
    """True for a version whose stored fit failed (log-likelihood not a number), including fits an earlier
    caseview saved with a partial summary."""
    raw = version.fit_summary
    return isinstance(raw, dict) and "log_likelihood" in raw and raw["log_likelihood"] is None


def stored_fit_summary(version):
    """The :class:`hmm.fitting.FitSummary` stored with a model version; None when it was entered, not fitted.

    Raises
    ------
    InputError
        When the stored summary cannot be read (names the version).
    """
    from hmm.fitting import FitSummary

    if not version.fit_summary:
        return None
    try:
        return FitSummary.from_dict(version.fit_summary)
    except ValueError as exc:
        raise InputError(f"model version {version.id}: {exc}") from None


# ------------------------------------------------------------------ preview (window)
@dataclass(frozen=True)
class FitPreview:
    """What making a fitted version current would change, as of one date.

    Attributes
    ----------
    as_of : datetime.date
    case_ids : ndarray of object, shape (n_cases,)
    p_follow_up_before, p_follow_up_after : ndarray, shape (n_cases,)
        P(in a follow-up stage now) under the current and the fitted model.
    flagged_before, flagged_after : ndarray of bool, shape (n_cases,)
    gained, lost : tuple of str
        Case IDs newly flagged / no longer flagged.
    biggest_changes : tuple of (str, float, float)
        Up to ``top`` cases with the largest change in P(follow-up now): (case ID, before, after).
    """

    as_of: dt.date
    case_ids: np.ndarray
    p_follow_up_before: np.ndarray
    p_follow_up_after: np.ndarray
    flagged_before: np.ndarray
    flagged_after: np.ndarray
    gained: tuple
    lost: tuple
    biggest_changes: tuple


def preview_fit(outcome: FitOutcome, as_of: dt.date, horizon_days: float, rules=None, top: int = 10) -> FitPreview:
    """Score the same caseload with the current and the fitted model and compare (no storage).

    ``rules`` are the workspace's follow-up rules (defaults when None). Rules that compare with an
    earlier saved run (a sharp rise) are evaluated without one, the same way for both models.
    """
    from ..followup import assess_scores
    from ..dates import to_day
    from ..scoring import score_loaded

    day = to_day(as_of)
    caseload = outcome.inputs.caseload
    before = score_loaded(caseload, outcome.inputs.model, day, horizon_days)
    after = score_loaded(caseload, outcome.result.model, day, horizon_days)
    flagged_before = assess_scores(before, rules, explain_reasons=False).is_flagged
    flagged_after = assess_scores(after, rules, explain_reasons=False).is_flagged
    ids = np.asarray(before.case_ids, dtype=object)
    change = after.p_follow_up_now - before.p_follow_up_now
    order = np.argsort(-np.abs(change), kind="stable")[:top]
    return FitPreview(as_of, ids, before.p_follow_up_now, after.p_follow_up_now, flagged_before, flagged_after,
                      tuple(str(c) for c in ids[~flagged_before & flagged_after]),
                      tuple(str(c) for c in ids[flagged_before & ~flagged_after]),
                      tuple((str(ids[i]), float(before.p_follow_up_now[i]), float(after.p_follow_up_now[i]))
                            for i in order if change[i] != 0))


# ------------------------------------------------------------------ fit check
@dataclass(frozen=True)
class FitCheckOptions:
    """Options of the goodness-of-fit check (see ``caseview check-fit --help``)."""

    channel: str | None = None
    group_by: str = "category"
    gap_bands: int = 3
    covariate_groups: bool = True
    bootstrap: int = 99
    refit: bool = False
    seed: int = DEFAULT_SEED
    time_bins: int = 12

    def check(self, model) -> None:
        for name, value, least in (("simulated caseloads", self.bootstrap, 0), ("gap bands", self.gap_bands, 1),
                                   ("time bins", self.time_bins, 1)):
            if value < least:
                raise InputError(f"{name}: expected a whole number >= {least}, got {value}")
        names = [c.name for c in model.channels]
        if self.channel is not None and self.channel not in names:
            raise InputError(f"channel: no channel {self.channel!r} in the current model "
                             f"(channels: {', '.join(names) or 'none'})")


@dataclass(frozen=True)
class FitCheckOutcome:
    inputs: FitInputs
    options: FitCheckOptions
    result: GoodnessOfFit


def compute_fit_check(inputs: FitInputs, options: FitCheckOptions, callback=None) -> FitCheckOutcome:
    """Goodness of fit of the inputs' model (no storage; safe in a worker thread)."""
    from hmm.fitting import goodness_of_fit

    from .fit_guards import refuse_unscorable_cases

    options.check(inputs.model)
    refuse_unscorable_cases(inputs.caseload, inputs.model)   # the same refusal as a fit
    try:
        result = goodness_of_fit(inputs.model, inputs.timelines, channel=options.channel, group_by=options.group_by,
                                 gap_bands=options.gap_bands, covariate_groups=options.covariate_groups,
                                 bootstrap=options.bootstrap, refit=options.refit,
                                 rng=random_generator(options.seed), time_bins=options.time_bins,
                                 callback=callback)
    except ValueError as exc:
        raise InputError(f"cannot check the fit: {exc}") from None
    return FitCheckOutcome(inputs, options, result)


def record_fit_check(ws, outcome: FitCheckOutcome, actor: str) -> None:
    """One audit entry ``model.fit_check`` (the same details from the window and the command line)."""
    r, o = outcome.result, outcome.options
    ws.audit_append(actor, "model.fit_check", f"model:{outcome.inputs.version_id}",
                    {"statistic": round(r.statistic, 6),
                     "p_value": None if not r.n_bootstrap else round(r.p_value, 6),
                     "bootstrap": r.n_bootstrap, "refit": r.refit, "seed": o.seed, "channel": o.channel,
                     "group_by": o.group_by, "gap_bands": o.gap_bands, "cells": len(r.observed), "pairs": r.n_pairs,
                     "contacts_as_of": None if outcome.inputs.contacts_as_of is None
                     else outcome.inputs.contacts_as_of.isoformat()})


def run_fit_check(ws, options: FitCheckOptions, actor: str, as_of: dt.date | None = None,
                  callback=None) -> FitCheckOutcome:
    """Read, check and audit in one go (the command line)."""
    outcome = compute_fit_check(fit_inputs(ws, as_of), options, callback=callback)
    record_fit_check(ws, outcome, actor)
    return outcome
