"""The fit summary contract: typed, JSON round trip, summaries stored before format versions still read."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from fitting_helpers import simulate, three_stage_model
from hmm.fitting import FitIteration, FitSummary, StartResult, fit_model

FORMAT_1 = Path(__file__).resolve().parent / "data" / "fit_summary_format1_demo.json"


@pytest.fixture(scope="module")
def result():
    model = three_stage_model()
    sim = simulate(model, np.random.default_rng(20261203), n_cases=120, n_contacts=6)
    return fit_model(model, sim.timelines, starts=2, rng=np.random.default_rng(1), intervals="wald")


def test_summary_round_trips_through_json(result):
    summary = result.to_summary().with_provenance("2026-11-30", 3)
    stored = json.loads(json.dumps(summary.to_dict(), allow_nan=False))
    assert stored["format_version"] == 2
    again = FitSummary.from_dict(stored)
    assert again == summary
    assert again.contacts_as_of == "2026-11-30" and again.fitted_from_version == 3
    assert again.interval_kind == "wald" and all(isinstance(h, FitIteration) for h in again.history)
    assert set(again.mean_time_by_stage()) == {"Well", "Unwell"}


def test_each_start_and_the_progress_are_typed(result):
    assert len(result.starts) == 2 and all(isinstance(s, StartResult) for s in result.starts)
    assert result.start_log_likelihoods == [s.log_likelihood for s in result.starts]
    phases = []
    model = three_stage_model()
    sim = simulate(model, np.random.default_rng(2), n_cases=40, n_contacts=4)
    fit_model(model, sim.timelines, starts=1, intervals="wald", on_progress=phases.append)
    assert phases[-1].phase == "done" and phases[-1].fraction == 1.0
    assert {p.phase for p in phases} >= {"start", "information", "done"}
    assert [p.fraction for p in phases] == sorted(p.fraction for p in phases)


def test_a_summary_stored_by_the_code_before_format_versions_reads_as_wald():
    # saved from `caseview fit` on the demo workspace before FitSummary existed
    old = FitSummary.from_dict(json.loads(FORMAT_1.read_text(encoding="utf-8")))
    assert old.interval_kind == "wald" and old.n_cases == 400 and old.converged
    assert old.log_likelihood == pytest.approx(-8933.50, abs=0.01)
    assert old.mean_time_by_stage()["Stable"].interval_kind == "wald"
    assert old.history and isinstance(old.history[0], FitIteration)
    # a hazard ratio the old code marked not informative is read as weakly identified
    assert "hazard ratio of balance_programme on Slipping -> Crisis" in old.weakly_identified
    assert "stored before profile intervals existed" in old.interval_label()


def test_an_impossible_case_gives_a_null_log_likelihood_that_reads_back():
    # a case recorded in the absorbing stage Gone and later in Well cannot happen under the model
    from hmm import Timelines

    model = three_stage_model()
    sim = simulate(model, np.random.default_rng(4), n_cases=20, n_contacts=4).timelines
    allowed = np.ones((2, 3), dtype=bool)
    allowed[0] = [False, False, True]
    allowed[1] = [True, False, False]
    impossible = Timelines(np.array([0, 2]), np.array([0.0, 30.0]), np.full((2, 2), -1, dtype=np.int16), allowed,
                           np.zeros((2, 1)))
    both = Timelines(np.concatenate([sim.offsets, sim.offsets[-1] + impossible.offsets[1:]]),
                     np.concatenate([sim.times, impossible.times]),
                     np.concatenate([sim.observations, impossible.observations]),
                     np.concatenate([sim.allowed_stages, impossible.allowed_stages]),
                     np.concatenate([sim.covariates, impossible.covariates]))
    result = fit_model(model, both, starts=1)
    assert not result.converged and any("impossible" in w for w in result.warnings)
    stored = json.loads(json.dumps(result.to_summary().to_dict(), allow_nan=False))
    assert stored["log_likelihood"] is None and stored["aic"] is None
    again = FitSummary.from_dict(stored)
    assert again.log_likelihood is None and not again.log_likelihood_is_finite and again.interval_kind == "none"
    assert "not finite" in again.format_table()


@pytest.mark.parametrize("data,message", [([], "JSON object"), ({"aic": "n/a"}, "no 'log_likelihood'"),
                                          ({"format_version": 99}, "format_version 99")])
def test_unreadable_summaries_say_why(data, message):
    with pytest.raises(ValueError, match=message):
        FitSummary.from_dict(data)
