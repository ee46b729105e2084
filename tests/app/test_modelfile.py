"""Model-file validation and round trip (caseview/modelfile.py)."""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.modelfile import dump_model, load_model, model_from_dict, parse_model
from tests.conftest import DEMO_MODEL


@pytest.fixture
def demo_dict():
    return json.loads(DEMO_MODEL.read_text(encoding="utf-8"))


def test_demo_model_loads_and_round_trips(demo_model):
    again = parse_model(dump_model(demo_model))
    assert again.stages == demo_model.stages
    np.testing.assert_array_equal(again.initial, demo_model.initial)
    assert again.transitions == demo_model.transitions
    for a, b in zip(again.channels, demo_model.channels):
        assert a.name == b.name and a.categories == b.categories
        np.testing.assert_array_equal(a.probabilities, b.probabilities)
    assert again.follow_up_stages == ("Struggling", "Crisis")
    assert demo_model.absorbing_stages == (demo_model.stage_index("Moved to residential care"),)


def test_generator_rows_sum_to_zero_and_apply_hazard_ratios(demo_model):
    q0 = demo_model.generator([0, 0])
    q1 = demo_model.generator([1, 0])
    np.testing.assert_allclose(q0.sum(axis=1), 0, atol=1e-15)
    r, s = demo_model.stage_index("Stable"), demo_model.stage_index("Slipping")
    # q_rs(x) = rate * exp(beta x): lives_alone effect 0.4 on Stable -> Slipping (model file)
    assert q1[r, s] == pytest.approx(q0[r, s] * np.exp(0.4), rel=1e-12)


def _mutated(demo_dict, change):
    data = copy.deepcopy(demo_dict)
    change(data)
    return data


@pytest.mark.parametrize("change, expected", [
    (lambda d: d["transitions"][0].update(to="Nowhere"), "transitions[0].to: unknown stage 'Nowhere'"),
    (lambda d: d["transitions"][0].update(rate=-0.1), "transitions[0].rate: must be >= 0"),
    (lambda d: d["transitions"].append(dict(d["transitions"][0])), "already given at transitions[0]"),
    (lambda d: d["channels"][0]["probabilities"].update(Stable=[0.5, 0.4, 0.2]),
     "channels[0].probabilities.Stable: probabilities must sum to 1 within 1e-6"),
    (lambda d: d["initial"].update(Stable=0.9), "initial: probabilities must sum to 1"),
    (lambda d: d["stages"].append("Stable"), "stages[5]: duplicate name 'Stable'"),
    (lambda d: d["transitions"][0]["effects"].update(age=1.0), "transitions[0].effects.age: unknown covariate"),
    (lambda d: d.update(format_version=7), "format_version: version 7 is newer"),
    (lambda d: d.update(follow_up_stages=["Calm"]), "follow_up_stages[0]: unknown stage 'Calm'"),
    (lambda d: d["channels"][1].update(categories=["none", "one"]),
     "channels[1].probabilities.Stable: expected a list of 2 probabilities"),
])
def test_invalid_models_get_precise_messages(demo_dict, change, expected):
    with pytest.raises(InputError) as info:
        model_from_dict(_mutated(demo_dict, change), "m.json")
    assert expected in str(info.value)
    assert str(info.value).startswith("m.json: ")


def test_bad_json_names_line_and_column(tmp_path):
    path = tmp_path / "bad.json"
    path.write_text('{"format": "caseview.stage-model",\n "stages": [1,,]}', encoding="utf-8")
    with pytest.raises(InputError, match=r"bad.json: line 2, column \d+: not valid JSON"):
        load_model(path)


def test_fixed_value_syntax_round_trips(demo_dict):
    data = _mutated(demo_dict, lambda d: (d["transitions"][0].update(fixed=True, fixed_effects=["lives_alone"]),
                                          d["channels"][0].update(fixed_stages=["Stable", "Crisis"]),
                                          d.update(initial_fixed=True)))
    model = model_from_dict(data)
    assert model.transitions[0].fixed_rate and model.transitions[0].fixed_effects == {"lives_alone"}
    assert model.channels[0].fixed_stages == {0, 3}
    again = parse_model(dump_model(model))
    assert again.transitions[0] == model.transitions[0]
    assert again.channels[0].fixed_stages == model.channels[0].fixed_stages and again.initial_fixed
