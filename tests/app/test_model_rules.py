"""A stage model's rules are worded once (hmm.model_rules): the engine, the model file and the staff
estimates give the same message for the same mistake, each with its own location (issue 14 item 2)."""

from __future__ import annotations

import json
from dataclasses import replace

import pytest

from caseview.errors import InputError
from caseview.modelfile import model_from_dict, parse_model
from caseview.staff_estimates_file import load_staff_estimates
from hmm.fitting.staff_estimates import staff_estimate_problems
from hmm.model import ModelError
from tests.conftest import ROOT

DEMO = ROOT / "demo_cases" / "home_support_model.json"
ESTIMATES = ROOT / "resources" / "models" / "home_support_staff_estimates.json"


def _messages(demo_change, engine_change, staff_change):
    data = json.loads(DEMO.read_text(encoding="utf-8"))
    demo_change(data)
    with pytest.raises(InputError) as from_file:
        model_from_dict(data, "m.json")
    with pytest.raises(ModelError) as from_engine:
        engine_change(parse_model(DEMO.read_text(encoding="utf-8")))
    estimates = load_staff_estimates(ESTIMATES)
    staff_change(estimates)
    problems = staff_estimate_problems(**estimates)
    return str(from_file.value), str(from_engine.value), [problem.message for problem in problems]


def test_a_stage_listed_twice():
    file_text, engine_text, staff = _messages(lambda d: d["stages"].append(d["stages"][0]),
                                              lambda m: replace(m, stages=m.stages[:-1] + m.stages[:1]),
                                              lambda e: e.update(stages=list(e["stages"]) + [e["stages"][0]]))
    assert file_text == "m.json: stages[5]: duplicate name 'Stable'"
    assert engine_text == "stages[4]: duplicate name 'Stable'"
    assert "duplicate name 'Stable'" in staff


def test_exact_entry_into_a_stage_people_leave():
    file_text, engine_text, staff = _messages(lambda d: d.update(exact_entry_stages=["Slipping"]),
                                              lambda m: replace(m, exact_entry_stages=("Slipping",)),
                                              lambda e: e.update(exact_entry_stages=["Slipping"]))
    message = "exact entry is only for stages people never leave; 'Slipping' has a way out"
    assert file_text == f"m.json: exact_entry_stages[0]: {message}"
    assert engine_text == f"exact_entry_stages[0]: {message}"
    assert message in staff


def test_probabilities_that_do_not_sum_to_one():
    def engine(m):
        channel = m.channels[0]
        table = channel.probabilities.copy()
        table[0, 0] += 0.1
        return replace(m, channels=(replace(channel, probabilities=table),) + m.channels[1:])

    def demo(d):
        d["channels"][0]["probabilities"]["Stable"][0] += 0.1

    file_text, engine_text, _ = _messages(demo, engine, lambda e: None)
    assert file_text.startswith("m.json: channels[0].probabilities.Stable: probabilities must sum to 1 within 1e-6")
    assert engine_text.startswith("channels[0].probabilities.Stable: probabilities must sum to 1 within 1e-6")
