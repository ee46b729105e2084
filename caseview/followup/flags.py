"""Evaluate follow-up rules on caseload scores, and explain every flag.

Each flag carries :class:`FlagReason` objects: the rule, the number against its threshold, and the
recent contacts that drove it. A contact's influence is measured by leaving it out: the filter is
re-run with that contact's evidence (observations and any known stage) set to missing, and the
change in the rule's probability is reported (``change = with - without``, so a positive change
means the contact raised the probability). Only flagged cases are re-run, all at once: one
timeline copy per left-out position (last, second last, ...), concatenated, one forward pass.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

import numpy as np

from hmm import MISSING, Timelines
from hmm.forecasting import reach_probability, stage_probabilities_now
from hmm.inference import forward

from caseview.dates import from_day

from . import wording
from .rules import RuleSet

#: How many of the most recent contacts are tested by leaving them out.
INFLUENCE_CONTACTS = 3
#: Flagged cases explained together (the result of a case does not depend on the batch).
EXPLAIN_BATCH = 5000



@dataclass(frozen=True)
class ContactInfluence:
    """How much one contact moved a case's follow-up probability.

    Attributes
    ----------
    date : datetime.date
    change : float
        Probability with the contact minus probability with that contact left out.
    day : int
        Days since 1970-01-01.
    evidence : str
        What was recorded, for example ``"mobility=unable, concern=serious"``.
    """

    date: dt.date
    change: float
    day: int = 0
    evidence: str = ""

    def describe(self) -> str:
        recorded = f" ({self.evidence})" if self.evidence else " (nothing recorded)"
        return f"{self.date.isoformat()}{recorded} {self.change:+.2f}"

    def sentence(self, what: str = "this") -> str:
        """Plain words: ``"The contact on 2026-11-07 (mobility unable) raised this by 3 points."``"""
        return wording.contact_sentence(self.date, self.evidence, self.change).replace(" this ", f" {what} ", 1)


@dataclass(frozen=True)
class FlagReason:
    """Why one rule fired for one case.

    Attributes
    ----------
    rule : str
    message : str
        One plain sentence with the numbers against the threshold, for example ``"Likely in a
        follow-up stage now (62%; the threshold is 50%)."`` (see :mod:`caseview.followup.wording`).
    value, threshold : float
    contacts : list[ContactInfluence]
        The most recent contacts, most influential (largest rise) first.
    """

    rule: str
    message: str
    value: float
    threshold: float
    contacts: list = field(default_factory=list)


def _concatenate(parts: list) -> Timelines:
    offsets = [np.zeros(1, dtype=np.int64)]
    shift = 0
    for t in parts:
        offsets.append(t.offsets[1:] + shift)
        shift += t.n_contacts
    return Timelines(np.concatenate(offsets), np.concatenate([t.times for t in parts]),
                     np.concatenate([t.observations for t in parts]),
                     np.concatenate([t.allowed_stages for t in parts]),
                     np.concatenate([t.covariates for t in parts]),
                     None if all(t.unscheduled is None for t in parts) else
                     np.concatenate([t.unscheduled_mask for t in parts]))


def evidence_text(model, observations: np.ndarray, allowed: np.ndarray) -> list:
    """Readable evidence per contact: ``channel=category`` pairs and any known stage.

    Parameters
    ----------
    observations : ndarray of int16, shape (m, n_channels)
    allowed : ndarray of bool, shape (m, n_stages)
    """
    out = []
    for codes, stages in zip(observations, allowed):
        parts = [f"{ch.name}={ch.categories[c]}" for ch, c in zip(model.channels, codes) if c != MISSING]
        if not stages.all():
            parts.append("stage known: " + "|".join(s for s, ok in zip(model.stages, stages) if ok))
        out.append(", ".join(parts))
    return out


def contact_influence(model, timelines: Timelines, as_of_day: int, cases, horizon_days: float,
                      base_now: np.ndarray, base_reach: np.ndarray, positions: int = INFLUENCE_CONTACTS):
    """Leave-one-out influence of the last ``positions`` contacts of the chosen cases.

    Parameters
    ----------
    model : hmm.StageModel
    timelines : Timelines
        The scored timelines (cut to the as-of date).
    as_of_day : int
    cases : ndarray of int, shape (m,)
        Case indices into ``timelines``.
    horizon_days : float
    base_now, base_reach : ndarray, shape (m,)
        P(follow-up now) and P(reach follow-up) of those cases with every contact.
    positions : int

    Returns
    -------
    days : ndarray of int64, shape (m, positions)
        Day of the k-th most recent contact (k = 0 is the last); -1 where the case has fewer.
    change_now, change_reach : ndarray, shape (m, positions)
        Probability with the contact minus without it (NaN where there is no such contact).
    evidence : list[list[str]]
        ``evidence[i][k]`` describes the contact.
    """
    cases = np.asarray(cases, dtype=np.int64)
    m = cases.size
    days = np.full((m, positions), -1, dtype=np.int64)
    change_now = np.full((m, positions), np.nan)
    change_reach = np.full((m, positions), np.nan)
    evidence = [[""] * positions for _ in range(m)]
    if m == 0:
        return days, change_now, change_reach, evidence
    chosen = timelines.subset(cases)
    counts = chosen.n_contacts_per_case
    parts, owners = [], []
    for k in range(positions):  # one copy of the chosen cases per left-out position
        have = np.flatnonzero(counts > k)
        if not have.size:
            break
        part = chosen.subset(have)
        rows = part.last_index - k
        observations = part.observations.copy()
        allowed = part.allowed_stages.copy()
        days[have, k] = part.times[rows].astype(np.int64)
        for i, text in zip(have, evidence_text(model, observations[rows], allowed[rows])):
            evidence[i][k] = text
        observations[rows] = MISSING
        allowed[rows] = True
        # the recorded values are left out; the contact itself (its date and kind) stays
        parts.append(Timelines(part.offsets, part.times, observations, allowed, part.covariates, part.unscheduled))
        owners.append((k, have))
    combined = _concatenate(parts)
    filtered = forward(model, combined).filtered
    p_now = stage_probabilities_now(model, combined, float(as_of_day), filtered=filtered)
    mask = model.follow_up_mask
    covariates = combined.covariates[combined.last_index]
    without_now = p_now[:, mask].sum(axis=1)
    without_reach = reach_probability(model, p_now, covariates, float(horizon_days), mask)
    start = 0
    for k, have in owners:
        stop = start + have.size
        change_now[have, k] = base_now[have] - without_now[start:stop]
        change_reach[have, k] = base_reach[have] - without_reach[start:stop]
        start = stop
    return days, change_now, change_reach, evidence


@dataclass(frozen=True)
class RuleEvaluation:
    """Which rules fired, aligned with the scores.

    Attributes
    ----------
    fired : ndarray of bool, shape (n_cases, n_rules)
        Column order = ``rules.names``; disabled rules never fire.
    values : ndarray, shape (n_cases, n_rules)
        The number each rule compares with its threshold (NaN when not available).
    """

    fired: np.ndarray
    values: np.ndarray
    rule_names: tuple


def evaluate_rules(scores, rules: RuleSet, previous_p_follow_up=None) -> RuleEvaluation:
    """Apply every enabled rule to every scored case (vectorised).

    Parameters
    ----------
    scores : caseview.scoring.CaseloadScores
    rules : RuleSet
    previous_p_follow_up : ndarray, shape (n_cases,), optional
        P(follow-up now) of each case in the previous saved score run (NaN where absent).
    """
    n = scores.n_cases
    previous = np.full(n, np.nan) if previous_p_follow_up is None else np.asarray(previous_p_follow_up, float)
    names = rules.names
    fired = np.zeros((n, len(names)), dtype=bool)
    values = np.full((n, len(names)), np.nan)
    for j, rule in enumerate(rules):
        if rule.name == "in_follow_up_now":
            values[:, j] = scores.p_follow_up_now
            hit = values[:, j] >= rule.threshold
        elif rule.name == "likely_to_reach_follow_up":
            values[:, j] = scores.p_reach_follow_up
            hit = values[:, j] >= rule.threshold
        elif rule.name == "long_gap_uncertain":
            values[:, j] = scores.days_since_contact
            hit = (values[:, j] >= rule.threshold) & \
                (scores.most_likely_probability < rule.parameters["certainty_below"])
        elif rule.name == "sharp_rise":
            with np.errstate(invalid="ignore"):
                values[:, j] = scores.p_follow_up_now - previous
                hit = np.nan_to_num(values[:, j], nan=-np.inf) >= rule.threshold
        else:  # pragma: no cover - RuleSet validation only admits known names
            raise ValueError(f"unknown rule {rule.name}")
        fired[:, j] = hit & rule.enabled
    return RuleEvaluation(fired, values, names)


def explain(scores, rules: RuleSet, evaluation: RuleEvaluation, previous_p_follow_up=None,
            previous_as_of: dt.date | None = None, positions: int = INFLUENCE_CONTACTS):
    """Reasons for every flagged case.

    Returns
    -------
    reasons : list[list[FlagReason]], length n_cases
        Empty lists for cases that are not flagged.
    reason_text : ndarray of object, shape (n_cases,)
        One readable line per case ('' when not flagged).
    """
    n = scores.n_cases
    reasons = [[] for _ in range(n)]
    text = np.full(n, "", dtype=object)
    flagged = np.flatnonzero(evaluation.fired.any(axis=1))
    for start in range(0, flagged.size, EXPLAIN_BATCH):  # batches bound the leave-one-out copies in memory
        for case, case_reasons, line in zip(*explain_cases(scores, rules, evaluation,
                                                           flagged[start:start + EXPLAIN_BATCH],
                                                           previous_p_follow_up, previous_as_of, positions)):
            reasons[case] = case_reasons
            text[case] = line
    return reasons, text


def explain_cases(scores, rules: RuleSet, evaluation: RuleEvaluation, cases, previous_p_follow_up=None,
                  previous_as_of: dt.date | None = None, positions: int = INFLUENCE_CONTACTS):
    """Reasons for the flagged cases among ``cases`` (row indices), all at once.

    Lets a caller work reasons out for a few cases at a time (the window: the selected case first,
    then the risk queue, then the rest); the result for a case does not depend on which other
    cases are explained with it.

    Returns
    -------
    flagged : ndarray of int64, shape (m,)
        The rows of ``cases`` that are flagged (in the order given).
    reasons : list[list[FlagReason]], length m
    reason_text : list[str], length m
    """
    cases = np.asarray(cases, dtype=np.int64).reshape(-1)
    flagged = cases[evaluation.fired[cases].any(axis=1)] if cases.size else cases
    if not flagged.size:
        return flagged, [], []
    days, change_now, change_reach, evidence = contact_influence(
        scores.model, scores.timelines, scores.as_of_day, flagged, scores.horizon_days,
        scores.p_follow_up_now[flagged], scores.p_reach_follow_up[flagged], positions)
    previous = None if previous_p_follow_up is None else np.asarray(previous_p_follow_up, float)
    stage_names = scores.most_likely_stage_names
    certainty = scores.most_likely_probability
    all_reasons, all_text = [], []
    for i, case in enumerate(flagged):
        line, reasons = [], []
        for j, rule in enumerate(rules):
            if not evaluation.fired[case, j]:
                continue
            value, threshold = float(evaluation.values[case, j]), rule.threshold
            changes = change_now[i]
            if rule.name == "in_follow_up_now":
                message = wording.in_follow_up_sentence(value, threshold)
            elif rule.name == "likely_to_reach_follow_up":
                message = wording.reach_sentence(value, threshold, scores.horizon_days)
                changes = change_reach[i]
            elif rule.name == "long_gap_uncertain":
                message = wording.long_gap_sentence(value, threshold, str(stage_names[case]), float(certainty[case]),
                                                    rule.parameters["certainty_below"])
            else:  # sharp_rise
                message = wording.sharp_rise_sentence(float(previous[case]), float(scores.p_follow_up_now[case]),
                                                      threshold, previous_as_of)
            present = np.flatnonzero(days[i] >= 0)
            order = present[np.argsort(-changes[present], kind="stable")]
            contacts = [ContactInfluence(from_day(days[i, k]), float(changes[k]),
                                         int(days[i, k]), evidence[i][k]) for k in order]
            reasons.append(FlagReason(rule.name, message, value, threshold, contacts))
            line.append(message)
        first = reasons[0] if reasons else None
        top = wording.key_contact(first.contacts) if first is not None else None
        if top is not None:
            probability_rule = first.rule in ("in_follow_up_now", "likely_to_reach_follow_up")
            line.append(top.sentence("this" if probability_rule else "the chance of a follow-up stage now"))
        all_reasons.append(reasons)
        all_text.append(" ".join(line))
    return flagged, all_reasons, all_text
