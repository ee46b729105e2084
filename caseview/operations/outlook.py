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

from hmm.random_state import random_generator

from caseview.errors import InputError
from caseview.operations import DEFAULT_SEED

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
    from caseview.timeline_io.case_ids import match_coordinator_code

    return match_coordinator_code(coordinator, np.asarray(scores.coordinators).astype(str),
                                  f"the cases with a contact on or before {scores.as_of.isoformat()}")


def run_outlook(ws, as_of: dt.date, months: int = 12, referrals="auto", uncertainty: str = "none", draws: int = 200,
                seed: int = DEFAULT_SEED, coordinator: str | None = None, callback=None):
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
    from caseview.followup.parameter_draws import draw_models
    from caseview.scoring import score_caseload

    months, draws, seed = _check_options(months, uncertainty, draws, seed)
    model, version = ws.current_model()
    scale = (lambda lo, hi: (lambda f: callback(lo + (hi - lo) * f))) if callback else (lambda lo, hi: None)
    if uncertainty == "parameters":
        draw_models(model, version, 1, random_generator(seed))      # refuses before any long work
    scores = score_caseload(ws, as_of, 0.0, model=model, callback=scale(0.0, 0.4))   # no horizon forecast needed
    return outlook_from_scores(scores, version, as_of, months, referrals, uncertainty, draws, seed, coordinator,
                               callback=scale(0.4, 1.0))


def _check_options(months, uncertainty, draws, seed) -> tuple:
    months = _check_int(months, "number of month ends", 1, MAX_MONTHS)
    if uncertainty not in UNCERTAINTY_CHOICES:
        raise InputError(f"parameter uncertainty: expected one of {', '.join(UNCERTAINTY_CHOICES)}, got {uncertainty!r}")
    return months, _check_int(draws, "number of parameter draws", 1, MAX_DRAWS), _check_int(seed, "seed", 0, 2**32 - 1)


def outlook_from_scores(scores, version, as_of: dt.date, months: int = 12, referrals="auto", uncertainty: str = "none",
                        draws: int = 200, seed: int = DEFAULT_SEED, coordinator: str | None = None, callback=None,
                        now_sample: int | None = None):
    """:func:`run_outlook` for an already scored caseload (the report uses its assessment's scores).

    ``version`` is the model version the scores were made with (its fit covariance for the draws).
    ``now_sample``: open cases rescored under each draw (None = the default
    :data:`caseview.followup.now_draws.NOW_SAMPLE_CASES`, 0 = every case; benchmarks and tests).
    """
    from caseview.followup.outlook import compute_outlook, open_case_rows
    from caseview.followup.parameter_draws import draw_models
    from caseview.followup.referrals import referral_assumption

    months, draws, seed = _check_options(months, uncertainty, draws, seed)
    model = scores.model
    rng = random_generator(seed)
    drawn = draw_models(model, version, draws, rng) if uncertainty == "parameters" else None
    scores = _with_version(scores, None if version is None else version.id)   # None: not from a workspace
    coordinator = _check_coordinator(scores, coordinator)
    open_cases = open_case_rows(scores, coordinator)
    mine = np.ones(scores.n_cases, dtype=bool) if coordinator is None else \
        np.asarray(scores.coordinators).astype(str) == coordinator
    timelines = scores.timelines
    assumption = referral_assumption(referrals, scores.first_contact_day[mine],
                                     timelines.covariates[timelines.first_index][mine], scores.as_of_day,
                                     model.n_covariates)
    rates = assumption.draw_rates(rng, draws) if drawn is not None else None
    from dataclasses import replace

    result = compute_outlook(scores, as_of, months, assumption, open_cases, drawn, rates,
                             seed if drawn is not None else None, coordinator, callback=callback,
                             now_sample=now_sample, now_rng=rng)
    return replace(result, not_scored=scores.unscorable)


def _with_version(scores, version_id):
    from dataclasses import replace

    return scores if scores.model_version is not None else replace(scores, model_version=version_id)


def outlook_table(outlook) -> tuple:
    """``(header, columns)`` of the outlook CSV: one row per month end and stage, then the combined row."""
    header = ["date", "stage", "expected", "lower_95", "upper_95", "entries_expected", "bands"]
    dates, stages, expected, lower, upper, entries = [], [], [], [], [], []
    for t, day in enumerate(outlook.dates):
        for c, name in enumerate(outlook.rows):
            dates.append(day.isoformat())
            stages.append(name)
            expected.append(f"{outlook.expected[t, c]:.2f}")
            lower.append(f"{outlook.lower_95[t, c]:.0f}")
            upper.append(f"{outlook.upper_95[t, c]:.0f}")
            entries.append(f"{outlook.entries_expected[t, c]:.2f}")
    return header, [dates, stages, expected, lower, upper, entries, [outlook.bands_note()] * len(dates)]


def outlook_notes(outlook, withhold_dates: bool = False) -> list:
    """Plain sentences saying what the outlook counts and assumes (stdout, window, report).

    ``withhold_dates``: no calendar dates (reports with de-identified dates).
    """
    o = outlook.open_cases
    who = f" of coordinator {outlook.coordinator}" if outlook.coordinator else ""
    left = []
    if o.n_left_service:
        left.append(f"{o.n_left_service} with a recorded move to an exact-entry stage")
    if o.n_closed:
        left.append(f"{o.n_closed} closed")
    if o.n_unscorable:
        left.append(f"{o.n_unscorable} that cannot be scored (contradictory or impossible records)")
    when = "on the as-of date" if withhold_dates else f"as of {outlook.as_of.isoformat()}"
    referrals = outlook.referrals.describe()
    if withhold_dates and outlook.referrals.kind == "auto":
        referrals = (f"New referrals: {outlook.referrals.rate_per_month:.1f} a month (95% interval "
                     f"{outlook.referrals.lower_95:.1f} to {outlook.referrals.upper_95:.1f}), estimated from the "
                     "first contacts of the year before the as-of date as a Poisson rate, starting in the model's "
                     "initial stage mix.")
    return [f"{outlook.n_open} open cases{who} {when}" + (f" (left out: {'; '.join(left)})" if left else "")
            + (f", model version {outlook.model_version}" if outlook.model_version is not None else "") + ".",
            referrals, outlook.describe_uncertainty()]


def check_horizon(horizon) -> float:
    try:
        value = float(horizon)
    except (TypeError, ValueError):
        raise InputError(f"horizon: expected a number of days > 0, got {horizon!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise InputError(f"horizon: expected a number of days > 0, got {horizon!r}")
    return value


def run_targeting(ws, as_of: dt.date, changes, places, horizon=180.0, among: str = "flagged", seed: int = DEFAULT_SEED,
                  callback=None):
    """Rank cases for a limited number of places (:class:`caseview.followup.targeting.Targeting`).

    Parameters
    ----------
    changes : dict[str, float] or list of 'NAME=VALUE'
        The covariate change a place brings (for example ``balance_programme=1``).
    places : int
    horizon : float
        Days within which reaching a follow-up stage counts.
    among : 'flagged' or 'all'
        Candidates: open cases flagged by the workspace's rules (as ``caseview flags`` with its
        default 90-day horizon) or every open case.
    """
    from caseview.followup.assess import assess_caseload

    model, _ = ws.current_model()
    options = _check_targeting(model, changes, places, horizon, among, seed)
    assessment = assess_caseload(ws, as_of, 90.0, callback=callback, reopen=False, explain_reasons=False)
    return targeting_from_assessment(assessment, *options)


def _check_targeting(model, changes, places, horizon, among, seed) -> tuple:
    from caseview.followup.whatif import check_changes, parse_changes

    if among not in AMONG_CHOICES:
        raise InputError(f"candidates: expected one of {', '.join(AMONG_CHOICES)}, got {among!r}")
    places = _check_int(places, "number of places", 1, 10**7)
    horizon = check_horizon(horizon)
    seed = _check_int(seed, "seed", 0, 2**32 - 1)
    changes = parse_changes(changes, model) if isinstance(changes, (list, tuple)) else check_changes(changes, model)
    if not changes:
        raise InputError("the change a place brings is missing: give it as NAME=VALUE, for example balance_programme=1")
    return changes, places, horizon, among, seed


def targeting_from_assessment(assessment, changes, places, horizon=180.0, among: str = "flagged", seed: int = 1):
    """:func:`run_targeting` for an already assessed caseload (the window uses the one it shows).

    Candidates flagged in ``assessment`` (``among='flagged'``) or every open case (``'all'``).
    """
    from caseview.followup.outlook import open_case_rows
    from caseview.followup.targeting import rank_places

    scores = assessment.scores
    changes, places, horizon, among, seed = _check_targeting(scores.model, changes, places, horizon, among, seed)
    open_cases = open_case_rows(scores)
    pool = open_cases.rows
    left_out = scores.n_cases - pool.size
    if among == "flagged":
        pool = pool[np.asarray(assessment.is_flagged, dtype=bool)[pool]]
    if pool.size == 0:
        raise InputError(f"no {'flagged ' if among == 'flagged' else ''}open cases as of {scores.as_of.isoformat()} "
                         "to rank" + (" (try all open cases as candidates)" if among == "flagged" else ""))
    return rank_places(scores, pool, changes, places, horizon, among, seed, left_out)


def targeting_table(result) -> tuple:
    """``(header, columns)`` of the ranking CSV."""
    header = ["rank", "case_id", "coordinator", "p_reach_without", "p_reach_with", "reduction"]
    n = result.n_ranked
    return header, [[str(i + 1) for i in range(n)], _safe(result.case_ids), _safe(result.coordinators),
                    [f"{v:.4f}" for v in result.p_reach_without], [f"{v:.4f}" for v in result.p_reach_with],
                    [f"{v:.4f}" for v in result.reduction]]


def targeting_comparison(result) -> list:
    """``(choice, expected_averted, lower_95, upper_95)`` rows: by benefit, by risk, at random."""
    mean, low, high = result.averted_at_random
    return [("by benefit (this ranking)", result.averted_by_benefit, None, None),
            ("highest risk without the change", result.averted_by_risk, None, None),
            (f"at random ({result.n_random_draws} seeded draws, seed {result.seed})", mean, low, high)]


def targeting_summary_lines(result) -> list:
    """The summary both faces show (and the CLI writes to the summary file)."""
    from caseview import ADVISORY_NOTICE
    from caseview.followup.targeting import PLANNING_NOTE

    change = ", ".join(f"{k}={v:g}" for k, v in result.changes.items())
    who = "flagged open cases" if result.among == "flagged" else "open cases"
    short = (f" (only {result.pool_size} candidates for {result.places} places)"
             if result.n_ranked < result.places else "")
    lines = [f"{result.n_ranked} places for {change} among {result.pool_size} {who} as of {result.as_of.isoformat()}"
             f"{short}; horizon {result.horizon_days:g} days.",
             f"Without the change, an expected {result.expected_reaching:.1f} of them reach a follow-up stage "
             "within the horizon.",
             "Expected cases kept from reaching a follow-up stage (entries averted):"]
    for name, value, low, high in targeting_comparison(result):
        interval = "" if low is None else f" (95% of random choices between {low:.2f} and {high:.2f})"
        lines.append(f"  {name}: {value:.2f}{interval}")
    return lines + [PLANNING_NOTE, ADVISORY_NOTICE]


def _safe(values):
    return [("'" + v) if v[:1] in ("=", "+", "-", "@") else v for v in map(str, values)]


def export_outlook(outlook, path) -> None:
    """Write the outlook CSV (with the advisory column), the one writer both faces use."""
    from caseview.cli.basic import write_table

    write_table(str(path), *outlook_table(outlook))


def export_targeting(result, path) -> str | None:
    """Write the ranking CSV and, beside it, ``<name>_summary.csv`` with the three-way comparison.

    Returns the summary file's path (None when writing the ranking to standard output).
    """
    from pathlib import Path

    from caseview.cli.basic import write_table
    from caseview.followup.targeting import PLANNING_NOTE

    write_table(str(path), *targeting_table(result))
    if str(path) == "-":
        return None
    target = Path(path)
    summary = target.with_name(target.stem + "_summary" + (target.suffix or ".csv"))
    rows = targeting_comparison(result)
    columns = [[r[0] for r in rows], [str(result.places)] * 3, [f"{r[1]:.4f}" for r in rows],
               ["" if r[2] is None else f"{r[2]:.4f}" for r in rows],
               ["" if r[3] is None else f"{r[3]:.4f}" for r in rows],
               [PLANNING_NOTE] * 3]
    write_table(str(summary), ["choice", "places", "expected_averted", "lower_95", "upper_95", "note"], columns)
    return str(summary)
