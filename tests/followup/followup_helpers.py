"""Helpers for follow-up tests: small caseloads constructed by hand, scored without a database."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from reference_filter import reference_p_now  # noqa: F401  (the one reference filter of the tests)

from hmm import MISSING, Timelines

EPOCH = dt.date(1970, 1, 1)
DEMO_MODEL_PATH = Path(__file__).resolve().parents[2] / "resources" / "models" / "home_support_demo.json"


def day(text: str) -> int:
    return (dt.date.fromisoformat(text) - EPOCH).days


@dataclass(frozen=True)
class SmallCaseload:
    """Caseload-like object with the fields of caseview.storage.Caseload."""

    case_ids: np.ndarray
    coordinators: np.ndarray
    contact_days: np.ndarray
    timelines: Timelines
    raw_values: dict


def build_caseload(model, cases) -> SmallCaseload:
    """cases: list of (case_id, coordinator, [(date, {channel: category}, {covariate: value}[, known]), ...]).

    Cases must be given sorted by case_id and contacts by date (as load_caseload returns them);
    ``known`` is a known stage text ('A|B').
    """
    case_index, times, observations, covariates, allowed = [], [], [], [], []
    raw = {c.name: [] for c in model.channels}
    for i, (_, _, contacts) in enumerate(cases):
        for contact in contacts:
            date, values, covs = contact[:3]
            known = contact[3] if len(contact) > 3 else ""
            allowed.append([not known or s in known.split("|") for s in model.stages])
            case_index.append(i)
            times.append(day(date))
            codes = []
            for channel in model.channels:
                text = values.get(channel.name, "")
                codes.append(channel.categories.index(text) if text else MISSING)
                raw[channel.name].append(text)
            observations.append(codes)
            covariates.append([float(covs.get(name, 0.0)) for name in model.covariates])
    n = len(times)
    timelines = Timelines.from_contacts(np.array(case_index), np.array(times, dtype=float),
                                        np.array(observations, dtype=np.int16).reshape(n, len(model.channels)),
                                        np.array(allowed, dtype=bool).reshape(n, model.n_stages),
                                        np.array(covariates, dtype=float).reshape(n, model.n_covariates))
    return SmallCaseload(np.array([c[0] for c in cases], dtype=object), np.array([c[1] for c in cases], dtype=object),
                         np.array(times, dtype=np.int64), timelines,
                         {k: np.array(v, dtype=object) for k, v in raw.items()})


CALM = {"mobility": "normal", "falls": "none", "concern": "none"}
MIXED = {"mobility": "slow", "falls": "none", "concern": "some"}
BAD = {"mobility": "unable", "falls": "one", "concern": "serious"}


TOY_MODEL = {
    # Invented three-stage chain with closed-form answers: Well -> Worse -> Bad, Bad absorbing.
    "format": "caseview.stage-model", "format_version": 1, "name": "toy chain (invented)",
    "stages": ["Well", "Worse", "Bad"], "initial": {"Well": 0.7, "Worse": 0.3, "Bad": 0.0},
    "transitions": [
        {"from": "Well", "to": "Worse", "rate": 0.01},
        {"from": "Worse", "to": "Bad", "rate": 0.02, "effects": {"programme": -0.7}},
    ],
    "channels": [{"name": "sign", "kind": "categorical", "categories": ["none", "some", "strong"],
                  "probabilities": {"Well": [0.8, 0.15, 0.05], "Worse": [0.3, 0.5, 0.2],
                                    "Bad": [0.1, 0.3, 0.6]}}],
    "covariates": [{"name": "programme", "kind": "numeric"}],
    "follow_up_stages": ["Bad"],
}


def reference_for_case(model, timelines, case, as_of, drop=None, blank=None):
    """reference_p_now for case ``case`` of ``timelines``, optionally with the contact at position
    ``drop`` (within the case) deleted, or the one at ``blank`` kept with its evidence blanked."""
    rows = list(range(timelines.offsets[case], timelines.offsets[case + 1]))
    codes = timelines.observations[rows].copy()
    allowed = timelines.allowed_stages[rows].copy()
    if blank is not None:
        codes[blank] = -1
        allowed[blank] = True
    keep = [k for k in range(len(rows)) if k != drop]
    rows = np.asarray(rows)[keep]
    return reference_p_now(model, timelines.times[rows], codes[keep], allowed[keep],
                           timelines.covariates[rows], as_of)


def write_workspace(path, model_path, model, cases, actor="tester"):
    """Create a workspace at ``path`` holding ``cases`` (same layout as build_caseload)."""
    from caseview.storage import ContactBatch, Workspace

    codes, days, coordinators, values, covariates, known = [], [], [], [], [], []
    for code, coordinator, contacts in cases:
        for contact in contacts:
            date, obs, covs = contact[:3]
            codes.append(code)
            days.append(day(date))
            coordinators.append(coordinator)
            values.append([ch.categories.index(obs[ch.name]) if obs.get(ch.name) else -1 for ch in model.channels])
            covariates.append([float(covs.get(name, 0.0)) for name in model.covariates])
            known.append(contact[3] if len(contact) > 3 else "")
    n = len(days)
    batch = ContactBatch(np.array(codes, dtype=object), np.array(days, dtype=np.int64),
                         np.array(coordinators, dtype=object), tuple(c.name for c in model.channels),
                         tuple(tuple(c.categories) for c in model.channels),
                         np.array(values, dtype=np.int16).reshape(n, len(model.channels)),
                         tuple(model.covariates), np.array(covariates, dtype=float).reshape(n, model.n_covariates),
                         np.array(known, dtype=object))
    ws = Workspace.create(path, Path(model_path).read_text(encoding="utf-8"), actor)
    with ws.transaction():  # audited like an import, so the audit trail covers the rows
        counts = ws.write_contacts(batch)
        ws.audit_append(actor, "import", "test timelines", {}, changes=counts.row_changes)
    return ws


def run_cli(capsys, *argv):
    """``caseview ARGV`` in process: (exit code, stdout, stderr); argparse refusals give their exit code."""
    from caseview.cli.main import main

    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse refuses the options (one line on stderr, exit 2)
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err
