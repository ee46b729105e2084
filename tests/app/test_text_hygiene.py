"""Audit and CSV hygiene (issue 12 item 7): strict JSON, one naming rule for model names, formula
text neutralised in every writer, control characters refused on input and escaped on output, and
review notes screened for identifiers."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from caseview.cli.main import main
from caseview.errors import InputError
from caseview.modelfile import parse_model

ROOT = Path(__file__).resolve().parents[2]
MODEL = json.loads((ROOT / "resources" / "models" / "home_support_demo.json").read_text(encoding="utf-8"))


def _text(model) -> str:
    return json.dumps(model)


def _renamed(stage=None, channel=None, category=None, covariate=None):
    model = copy.deepcopy(MODEL)
    if stage is not None:
        old = model["stages"][0]
        text = json.dumps(model).replace(f'"{old}"', json.dumps(stage))
        model = json.loads(text)
    if channel is not None:
        model["channels"][0]["name"] = channel
    if category is not None:
        model["channels"][0]["categories"][1] = category
    if covariate is not None:
        old = model["covariates"][0]["name"]
        model = json.loads(json.dumps(model).replace(f'"{old}"', json.dumps(covariate)))
    return model


# ---------------------------------------------------------------- strict JSON
@pytest.mark.parametrize("text,where,what", [
    ('{"format": "caseview.stage-model", "format": "x"}', "format", "given twice"),
    (_text(MODEL).replace('"rate": 0.003,', '"rate": 0.003, "rate": 5,', 1), "transitions[0].rate", "given twice"),
    (_text(MODEL).replace('"rate": 0.003', '"rate": ' + "9" * 5000, 1), "transitions[0].rate", "5000 digits"),
    (_text(MODEL).replace('"rate": 0.003', '"rate": 1e999', 1), "transitions[0].rate", "too large"),
    (_text(MODEL).replace('"rate": 0.003', '"rate": NaN', 1), "transitions[0].rate", "NaN and Infinity"),
    ('{"a": ' + "[" * 100_000 + "]" * 100_000 + "}", "line 1, column 38", "nest more than 32"),
])
def test_model_json_is_read_strictly_with_a_json_path(text, where, what):
    with pytest.raises(InputError) as info:
        parse_model(text, source="m.json")
    assert str(info.value).startswith(f"m.json: {where}: ") and what in str(info.value)


def test_hostile_model_file_is_a_clear_cli_error(tmp_path, capsys):
    path = tmp_path / "deep.json"
    path.write_text("[" * 200_000 + "]" * 200_000, encoding="utf-8")
    assert main(["init", str(tmp_path / "w.cvw"), "--model", str(path)]) == 2
    err = capsys.readouterr().err
    assert "internal error" not in err and "nest more than" in err


# ---------------------------------------------------------------- one naming rule
@pytest.mark.parametrize("change,where,what", [
    ({"stage": " Stable"}, "stages[0]", "spaces at the start or end"),
    ({"stage": "Sta|ble"}, "stages[0]", "'|'"),
    ({"stage": "Sta\nble"}, "stages[0]", "control or invisible"),
    ({"stage": "Sta\u200bble"}, "stages[0]", "control or invisible"),
    ({"stage": "date"}, "stages[0]", "reserved"),
    ({"stage": "slipping"}, "stages[1]", "become the same column"),
    ({"channel": "case_id"}, "channels[0].name", "reserved"),
    ({"channel": "contact_kind"}, "channels[0].name", "reserved"),
    ({"channel": "Concern"}, "channels[2].name", "differ only in letter case"),
    ({"category": "Normal"}, "channels[0].categories[1]", "differ only in letter case"),
    ({"category": "normal "}, "channels[0].categories[1]", "spaces at the start or end"),
    ({"category": "a\tb"}, "channels[0].categories[1]", "control or invisible"),
    ({"covariate": "stage_known"}, "covariates[0].name", "reserved"),
    ({"covariate": "Mobility"}, "covariates[0].name", "differ only in letter case"),
])
def test_one_naming_rule_for_every_model_name(change, where, what):
    with pytest.raises(InputError) as info:
        parse_model(_text(_renamed(**change)), source="m.json")
    assert f"m.json: {where}: " in str(info.value) and what in str(info.value)


def test_categories_that_collide_after_the_formula_escape_are_refused():
    model = _renamed()
    model["channels"][0]["categories"][1:3] = ["=x", "'=x"]
    with pytest.raises(InputError, match=r"channels\[0\]\.categories\[2\]: .*formula escape"):
        parse_model(_text(model), source="m.json")


def test_staff_estimate_stage_names_follow_the_same_rule():
    from caseview.staff_estimates_file import parse_staff_estimates

    text = (ROOT / "resources" / "models" / "home_support_staff_estimates.json").read_text(encoding="utf-8")
    first = json.loads(text)["stages"][0]
    with pytest.raises(InputError, match=r"stages\[0\]: .*'\|'"):
        parse_staff_estimates(text.replace(json.dumps(first), json.dumps(first + "|x")), source="e.json")


# ---------------------------------------------------------------- formula text in every writer
def test_write_table_neutralises_headers_and_text_but_not_numbers(tmp_path):
    import csv

    from caseview.cli.basic import write_table

    out = tmp_path / "t.csv"
    write_table(str(out), ["=name", "value", "@x"], [["=1+1", "ok", "+cmd"], ["-0.5", "-1e-05", "-x"],
                                                     ["a", "b", "c"]], advisory=False)
    rows = list(csv.reader(out.open(encoding="utf-8")))
    assert rows[0] == ["'=name", "value", "'@x"]
    assert [r[0] for r in rows[1:]] == ["'=1+1", "ok", "'+cmd"]
    assert [r[1] for r in rows[1:]] == ["-0.5", "-1e-05", "'-x"]
    one = tmp_path / "one.csv"
    write_table(str(one), ["=a"], [["=b"]], advisory=False)
    assert list(csv.reader(one.open(encoding="utf-8"))) == [["'=a"], ["'=b"]]


def test_model_names_starting_like_formulas_are_neutralised_in_score_and_export_files(tmp_path):
    import csv

    model = _renamed(stage="=Stable", channel="@mobility", category="+slow")
    model_path = tmp_path / "m.json"
    model_path.write_text(_text(model), encoding="utf-8")
    ws = tmp_path / "w.cvw"
    assert main(["init", str(ws), "--model", str(model_path), "--by", "tester"]) == 0
    timeline = tmp_path / "t.csv"
    timeline.write_text("case_id,date,coordinator,@mobility,falls,concern,lives_alone,balance_programme,stage_known\n"
                        "HS-0001,2025-01-05,C1,+slow,none,none,1,0,=Stable\n"
                        "HS-0002,2025-01-05,C1,+slow,none,none,1,0,\n", encoding="utf-8")
    assert main(["import", str(ws), str(timeline)]) == 0
    for args, name in ((["score", str(ws), "--as-of", "2025-01-05"], "s.csv"), (["export", str(ws)], "e.csv"),
                       (["history", str(ws), "HS-0001"], "h.csv")):
        out = tmp_path / name
        assert main([*args, "--out", str(out)]) == 0
        for row in csv.reader(out.open(encoding="utf-8")):
            for cell in row:
                assert not cell.startswith(("=", "+", "@")), (name, cell)
    exported = tmp_path / "e.csv"
    # caseview's own export reads back (the escaped header and cells are recognised)
    ws2 = tmp_path / "w2.cvw"
    assert main(["init", str(ws2), "--model", str(model_path)]) == 0
    assert main(["import", str(ws2), str(exported)]) == 0


# ---------------------------------------------------------------- control characters in --by / --note
def test_by_with_a_line_break_is_refused(tmp_path, capsys):
    ws = tmp_path / "w.cvw"
    assert main(["init", str(ws), "--model", str(ROOT / "resources/models/home_support_demo.json"),
                 "--by", "ann\n42\t2026-01-01\tmallory\timport"]) == 2
    assert "control character" in capsys.readouterr().err and not ws.exists()


def test_audit_show_escapes_stored_control_characters(tmp_path, capsys):
    from caseview.storage import Workspace

    path = tmp_path / "w.cvw"
    with Workspace.create(path, (ROOT / "resources/models/home_support_demo.json").read_text(), "tester") as ws:
        ws.audit_append("ann\n2\t2026-01-01T00:00:00\tmallory", "note\rx", "HS-1\u2028y", {"note": "a\nb"})
    capsys.readouterr()
    assert main(["audit", "show", str(path)]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[-1].startswith(f"{len(lines) - 1} entries shown")   # one line per entry, nothing forged
    assert "ann\\n2\\t2026-01-01T00:00:00\\tmallory" in lines[-2] and "HS-1\\u2028y" in lines[-2]
