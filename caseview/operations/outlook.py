"""Outlook and targeting jobs: the one function each that the window and ``caseview outlook`` / ``target`` call.

Both read the workspace (current model, contacts up to the as-of date), compute, and return a
typed result; :func:`outlook_table` and :func:`targeting_table` turn a result into the CSV columns
both faces write, and :func:`targeting_summary_lines` into the summary both show. Nothing is
written to the workspace. Everything is advisory (``caseview.ADVISORY_NOTICE``).
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np

from caseview.errors import InputError

UNCERTAINTY_CHOICES = ("none", "parameters")
AMONG_CHOICES = ("flagged", "all")
MAX_MONTHS = 120
MAX_DRAWS = 5000


def _check_int(value, what: str, low: int, high: int) -> int:
    try:
        number = int(value)
    except (TypeError, ValueError):
        raise InputError(f"{what}: expected a whole number from {low} to {high}, got {value!r}") from None
    if number != value and not (isinstance(value, str) and str(number) == value.strip()):
        raise InputError(f"{what}: expected a whole number from {low} to {high}, got {value!r}")
    if not low <= number <= high:
        raise InputError(f"{what}: expected a whole number from {low} to {high}, got {value!r}")
    return number


def _check_coordinator(scores, coordinator):
    if coordinator is None:
        return None
    known = sorted(set(np.asarray(scores.coordinators).astype(str)) - {""})
    if str(coordinator) not in known:
        raise InputError(f"--coordinator {coordinator}: no case with a contact on or before "
                         f"{scores.as_of.isoformat()} has that coordinator (coordinators: {', '.join(known) or 'none'})")
    return str(coordinator)


def run_outlook(ws, as_of: dt.date, months: int = 12, referrals="auto", uncertainty: str = "none", draws: int = 200,
                seed: int = 1, coordinator: str | None = None, callback=None):
    """The caseload outlook as of ``as_of`` (:class:`caseview.followup.outlook.Outlook`).

    Parameters
    ----------
    ws : caseview.storage.Workspace
    months : int
        Month ends ahead (1 to 120).
    referrals : 'auto', 'none' or a number of new referrals a month
    uncertainty : 'none' or 'parameters'
        'parameters' needs a fitted current model with a stored covariance; otherwise InputError.
    draws, seed : int
        Parameter draws and the seed of their random generator.
    coordinator : str, optional
        Only this coordinator's cases (and referral rate).
    callback : callable(fraction), optional
        Progress; raising from it cancels.
    """
    from caseview.followup.outlook import compute_outlook, open_case_rows
    from caseview.followup.parameter_draws import draw_models
    from caseview.followup.referrals import referral_assumption
    from caseview.scoring import score_caseload

    months = _check_int(months, "--months", 1, MAX_MONTHS)
    if uncertainty not in UNCERTAINTY_CHOICES:
        raise InputError(f"--uncertainty: expected one of {', '.join(UNCERTAINTY_CHOICES)}, got {uncertainty!r}")
    draws = _check_int(draws, "--draws", 1, MAX_DRAWS)
    seed = _check_int(seed, "--seed", 0, 2**32 - 1)
    model, version = ws.current_model()
    scale = (lambda lo, hi: (lambda f: callback(lo + (hi - lo) * f))) if callback else (lambda lo, hi: None)
    drawn = None
    rng = np.random.default_rng(seed)
    if uncertainty == "parameters":
        drawn = draw_models(model, version, draws, rng)       # refuses before any long work
    scores = score_caseload(ws, as_of, 90.0, model=model, callback=scale(0.0, 0.4))
    scores = _with_version(scores, version.id)
    coordinator = _check_coordinator(scores, coordinator)
    open_cases = open_case_rows(scores, coordinator)
    mine = np.ones(scores.n_cases, dtype=bool) if coordinator is None else \
        np.asarray(scores.coordinators).astype(str) == coordinator
    timelines = scores.timelines
    assumption = referral_assumption(referrals, scores.first_contact_day[mine],
                                     timelines.covariates[timelines.first_index][mine], scores.as_of_day,
                                     model.n_covariates)
    rates = assumption.draw_rates(rng, draws) if drawn else None
    return compute_outlook(scores, as_of, months, assumption, open_cases, drawn, rates, seed if drawn else None,
                           coordinator, callback=scale(0.4, 1.0))


def _with_version(scores, version_id):
    from dataclasses import replace

    return scores if scores.model_version is not None else replace(scores, model_version=version_id)


def outlook_table(outlook) -> tuple:
    """``(header, columns)`` of the outlook CSV: one row per month end and stage, then the combined row."""
    header = ["date", "stage", "expected", "lower_95", "upper_95", "entries_expected"]
    dates, stages, expected, lower, upper, entries = [], [], [], [], [], []
    for t, day in enumerate(outlook.dates):
        for c, name in enumerate(outlook.rows):
            dates.append(day.isoformat())
            stages.append(name)
            expected.append(f"{outlook.expected[t, c]:.2f}")
            lower.append(f"{outlook.lower_95[t, c]:.0f}")
            upper.append(f"{outlook.upper_95[t, c]:.0f}")
            entries.append(f"{outlook.entries_expected[t, c]:.2f}")
    return header, [dates, stages, expected, lower, upper, entries]


def outlook_notes(outlook) -> list:
    """Plain sentences saying what the outlook counts and assumes (stdout, window, report)."""
    o = outlook.open_cases
    who = f" of coordinator {outlook.coordinator}" if outlook.coordinator else ""
    left = []
    if o.n_left_service:
        left.append(f"{o.n_left_service} with a recorded move to an exact-entry stage")
    if o.n_closed:
        left.append(f"{o.n_closed} closed")
    if o.n_unscorable:
        left.append(f"{o.n_unscorable} that cannot be scored (contradictory or impossible records)")
    lines = [f"{outlook.n_open} open cases{who} as of {outlook.as_of.isoformat()}"
             + (f" (left out: {'; '.join(left)})" if left else "")
             + (f", model version {outlook.model_version}" if outlook.model_version is not None else "") + ".",
             outlook.referrals.describe(), outlook.describe_uncertainty()]
    return lines


def horizon_rows(outlook, months=(3, 6, 12)) -> list:
    """``(months, date, expected, lower, upper)`` of the combined follow-up row at some horizons (report table)."""
    from caseview.followup.outlook import FOLLOW_UP_ROW

    c = outlook.rows.index(FOLLOW_UP_ROW)
    return [(m, outlook.dates[m - 1], outlook.expected[m - 1, c], outlook.lower_95[m - 1, c], outlook.upper_95[m - 1, c])
            for m in months if m <= len(outlook.dates)]


def check_places(places, n_pool: int) -> int:
    number = _check_int(places, "--places", 1, max(1, 10**7))
    return number


def check_horizon(horizon) -> float:
    try:
        value = float(horizon)
    except (TypeError, ValueError):
        raise InputError(f"--horizon: expected a number of days > 0, got {horizon!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise InputError(f"--horizon: expected a number of days > 0, got {horizon!r}")
    return value
