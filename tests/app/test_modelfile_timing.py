"""The optional unscheduled_contacts block of the model file: parsing, messages, round trip."""

from __future__ import annotations

import json

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.modelfile import dump_model, model_to_dict, parse_model
from tests.conftest import DEMO_MODEL

RATES = {"Stable": 0.002, "Slipping": 0.004, "Struggling": 0.008, "Crisis": 0.02, "Moved to residential care": 0.0}


def demo_with(block) -> str:
    data = json.loads(DEMO_MODEL.read_text(encoding="utf-8"))
    data["unscheduled_contacts"] = block
    return json.dumps(data)


def test_block_parses_and_round_trips():
    model = parse_model(demo_with({"rates": RATES, "effects": {"lives_alone": 0.3}, "fixed_effects": ["lives_alone"]}))
    block = model.unscheduled_contacts
    np.testing.assert_array_equal(block.rates, [RATES[s] for s in model.stages])
    assert block.effects == {"lives_alone": 0.3} and block.fixed_effects == {"lives_alone"}
    again = parse_model(dump_model(model))
    assert model_to_dict(again) == model_to_dict(model)
    assert "unscheduled_contacts" not in model_to_dict(parse_model(DEMO_MODEL.read_text(encoding="utf-8")))


@pytest.mark.parametrize("block, fragment", [
    ([1, 2], "unscheduled_contacts: expected {"),
    ({"rates": {**RATES, "Nowhere": 0.1}}, "unscheduled_contacts.rates.Nowhere: unknown stage"),
    ({"rates": {k: v for k, v in RATES.items() if k != "Crisis"}}, "missing the rate for stage 'Crisis'"),
    ({"rates": {**RATES, "Crisis": -1}}, "unscheduled_contacts.rates.Crisis: must be >= 0"),
    ({"rates": {**RATES, "Crisis": "often"}}, "unscheduled_contacts.rates.Crisis: expected a finite number"),
    ({"rates": {k: 0 for k in RATES}}, "at least one stage needs a rate above 0"),
    ({"rates": RATES, "effects": {"age": 0.1}}, "unscheduled_contacts.effects.age: unknown covariate"),
    ({"rates": RATES, "fixed_effects": ["lives_alone"]}, "has no effect on unscheduled contacts to keep fixed"),
    ({"rates": RATES, "same_in_every_stage": True}, "every non-zero rate must be the same"),
    ({"rates": RATES, "speed": 1}, "unknown key(s) speed"),
])
def test_block_errors_name_the_json_path(block, fragment):
    with pytest.raises(InputError) as info:
        parse_model(demo_with(block), source="m.json")
    assert fragment in str(info.value) and str(info.value).startswith("m.json: ")
