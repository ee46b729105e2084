"""Staff-estimate files (caseview/staff_estimates_file.py) and `caseview model-from-estimates`."""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest

from caseview.errors import InputError
from caseview.modelfile import load_model
from caseview.staff_estimates_file import (dump_staff_estimates, estimates_from_dict, load_staff_estimates,
                                           model_from_estimates_file, parse_staff_estimates)
from hmm.fitting.staff_estimates import model_from_staff_estimates
from tests.conftest import ROOT

EXAMPLE = ROOT / "resources" / "models" / "home_support_staff_estimates.json"


@pytest.fixture
def example():
    return json.loads(EXAMPLE.read_text(encoding="utf-8"))


def test_example_gives_the_stays_and_shares_written_in_it(example):
    model = model_from_estimates_file(EXAMPLE)
    rates = model.baseline_rate_matrix()
    for stage, stay in example["typical_stay_days"].items():
        r = model.stage_index(stage)
        if stay == "never leaves":
            assert rates[r].sum() == 0
            continue
        # mean sojourn = -1 / q_rr (Norris 1997, Markov Chains, section 2.6)
        assert 1 / rates[r].sum() == pytest.approx(stay, rel=1e-14)
        for target, share in example["next_stage"][stage].items():
            assert rates[r, model.stage_index(target)] * stay == pytest.approx(share, rel=1e-14)
    mobility = model.channels[0]
    np.testing.assert_allclose(mobility.probabilities[0], [0.85, 0.075, 0.075])    # usual normal, wrong 0.15
    assert model.exact_entry_stages == ("Moved to residential care",)
    assert "invented" in example["note"] and "invented" in model.name


def test_file_round_trips_through_dump(example):
    estimates = load_staff_estimates(EXAMPLE)
    again = parse_staff_estimates(dump_staff_estimates(estimates))
    a, b = model_from_staff_estimates(**estimates), model_from_staff_estimates(**again)
    np.testing.assert_array_equal(a.baseline_rate_matrix(), b.baseline_rate_matrix())
    for x, y in zip(a.channels, b.channels):
        np.testing.assert_array_equal(x.probabilities, y.probabilities)


def _mutated(example, change):
    data = copy.deepcopy(example)
    change(data)
    return data


@pytest.mark.parametrize("change, expected", [
    (lambda d: d["next_stage"]["Slipping"].update(Crisis=0.2),
     "next_stage.Slipping: stage 'Slipping': the shares of where people go next add up to 1.1; expected 1"),
    (lambda d: d["typical_stay_days"].update(Crisis="a while"),
     'typical_stay_days.Crisis: expected a number of days or "never leaves", got \'a while\''),
    (lambda d: d["typical_stay_days"].update(Crisis=0),
     "typical_stay_days.Crisis: stage 'Crisis': the typical stay must be a positive number of days"),
    (lambda d: d["checks"][0]["results"]["Stable"].update(wrong=1.5),
     "checks[0].results.Stable.wrong: check 'mobility', stage 'Stable': how often the result is wrong"),
    (lambda d: d["checks"][0]["results"].update(Slipping=[0.5, 0.5]),
     "checks[0].results.Slipping: check 'mobility', stage 'Slipping': expected 3 probabilities"),
    (lambda d: d["checks"][2]["results"].update(Crisis={"usual": "panic", "wrong": 0.1}),
     "checks[2].results.Crisis.usual: check 'concern', stage 'Crisis': the usual result 'panic'"),
    (lambda d: d["hazard_ratios"][2]["ratios"].update(lives_alone=-1),
     "hazard_ratios[2].ratios.lives_alone: Slipping -> Struggling: the hazard ratio of 'lives_alone' must be"),
    (lambda d: d["hazard_ratios"].append({"from": "Stable", "to": "Crisis", "ratios": {"lives_alone": 2}}),
     "hazard_ratios[5]: hazard ratios for Stable -> Crisis, but no share of moves out of 'Stable'"),
    (lambda d: d["initial"].update(Stable=0.6), "initial: the shares of cases in each stage at their first contact "
                                                "add up to 1.05; expected 1"),
    (lambda d: d.update(format_version=3), "format_version: version 3 is newer"),
    (lambda d: d.update(format="caseview.stage-model"), 'format: expected "caseview.staff-estimates"'),
    (lambda d: d.update(typical_stays={}), "typical_stays: unknown key"),
    (lambda d: d["stages"].append("Stable"), "stages[5]: duplicate name 'Stable'"),
])
def test_problems_name_file_json_path_value_and_expectation(example, change, expected):
    with pytest.raises(InputError) as info:
        estimates_from_dict(_mutated(example, change), "est.json")
    message = str(info.value)
    assert message.startswith("est.json: ") and expected in message, message
    assert "\n" not in message


def run(*args):
    from cli_runner import run_cli

    return run_cli(*args)


def test_cli_writes_the_model_and_adds_it_to_a_workspace(tmp_path):
    out = tmp_path / "model.json"
    proc = run("model-from-estimates", EXAMPLE, "--out", out)
    assert proc.returncode == 0, proc.stderr
    assert "Stable" in proc.stdout and "330.0 days" in proc.stdout and f"wrote {out}" in proc.stdout
    model = load_model(out)
    assert 1 / model.baseline_rate_matrix()[0].sum() == pytest.approx(330.0, rel=1e-12)
    ws = tmp_path / "team.cvw"
    assert run("init", ws, "--model", out).returncode == 0
    proc = run("model-from-estimates", EXAMPLE, "--workspace", ws, "--by", "tester")
    assert proc.returncode == 0 and "saved as model version 2" in proc.stdout, proc.stderr
    from caseview.storage import Workspace

    with Workspace.open(ws) as w:
        assert [v.is_current for v in w.model_versions()] == [False, True]


def test_cli_errors_are_one_line(tmp_path, example):
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(_mutated(example, lambda d: d["next_stage"]["Crisis"].update(Struggling=0.5))),
                   encoding="utf-8")
    proc = run("model-from-estimates", bad, "--out", tmp_path / "m.json")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert proc.stderr.strip().count("\n") == 0
    assert f"{bad}: next_stage.Crisis: stage 'Crisis': the shares" in proc.stderr
    assert not (tmp_path / "m.json").exists()
    missing = run("model-from-estimates", tmp_path / "nope.json")
    assert missing.returncode == 2 and "staff-estimate file not found" in missing.stderr


def test_init_starts_a_workspace_straight_from_staff_estimates(tmp_path, example):
    ws = tmp_path / "small team.cvw"
    proc = run("init", ws, "--estimates", EXAMPLE, "--by", "lead")
    assert proc.returncode == 0 and "created workspace" in proc.stdout, proc.stderr
    from caseview.storage import Workspace

    with Workspace.open(ws) as w:
        model, _ = w.current_model()
    # mean sojourn = 1 / total exit rate (Norris 1997, Markov Chains, section 2.6)
    assert 1 / model.baseline_rate_matrix()[0].sum() == pytest.approx(330.0, rel=1e-12)
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(_mutated(example, lambda d: d["next_stage"]["Crisis"].update(Struggling=0.5))),
                   encoding="utf-8")
    refused = run("init", tmp_path / "other.cvw", "--estimates", bad)
    assert refused.returncode == 2 and "next_stage.Crisis" in refused.stderr and "Traceback" not in refused.stderr
    assert not (tmp_path / "other.cvw").exists()
    neither = run("init", tmp_path / "third.cvw")
    assert neither.returncode == 2 and "--model" in neither.stderr and "--estimates" in neither.stderr
