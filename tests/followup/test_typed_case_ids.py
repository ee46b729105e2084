"""Case IDs and coordinator codes typed on the command line are read like imported ones (issue 12
item 4): look-alike spellings find the stored case, what cannot be normalised is refused in one line,
and a near miss suggests the case it probably meant."""

from __future__ import annotations

import pytest

from caseview.cli.main import main
from caseview.errors import InputError
from caseview.storage import Workspace
from followup_helpers import BAD, CALM, DEMO_MODEL_PATH, MIXED, write_workspace, run_cli

CASES = [
    ("HS-0007", "C1", [("2026-06-01", CALM, {}), ("2026-11-20", BAD, {})]),
    ("HS-0002", "C1", [("2026-06-01", CALM, {}), ("2026-11-20", CALM, {})]),
    ("HS-0003", "C2", [("2026-09-01", MIXED, {"lives_alone": 1}), ("2026-11-25", BAD, {"lives_alone": 1})]),
]
LOOK_ALIKE = "hs\u20100007"          # lower case with a Unicode hyphen
FULL_WIDTH = "\uff28\uff33-\uff10\uff10\uff10\uff17\u200b"   # full-width letters/digits, zero-width space


@pytest.fixture
def ws_path(tmp_path, demo_model):
    path = tmp_path / "w.cvw"
    write_workspace(path, DEMO_MODEL_PATH, demo_model, CASES).close()
    return path


run = run_cli


@pytest.mark.parametrize("typed", [LOOK_ALIKE, FULL_WIDTH, "HS-0007"])
def test_find_case_reads_typed_ids_like_the_importer(ws_path, typed):
    with Workspace.open(ws_path) as ws:
        assert ws.find_case(typed) == "HS-0007"


def test_find_case_refuses_and_suggests(ws_path):
    with Workspace.open(ws_path) as ws:
        with pytest.raises(InputError, match="control characters"):
            ws.find_case("HS\n0007")
        with pytest.raises(InputError, match=r"no case 'HS0007' in .*; did you mean 'HS-0007'\?"):
            ws.find_case("HS0007")
        with pytest.raises(InputError, match=r"did you mean 'HS-0007'\?"):
            ws.find_case("HS-7")
        with pytest.raises(InputError) as info:
            ws.find_case("HS-0009")              # a digit edit is another person: no suggestion
        assert "did you mean" not in str(info.value) and "no case 'HS-0009'" in str(info.value)


def test_history_finds_a_look_alike_case_id(ws_path, capsys):
    code, out, err = run(capsys, "history", ws_path, LOOK_ALIKE, "--out", "-")
    assert code == 0, err
    assert out.splitlines()[1].startswith("HS-0007,2026-06-01")


def test_forecast_and_review_find_a_look_alike_case_id(ws_path, capsys):
    code, out, err = run(capsys, "forecast", ws_path, FULL_WIDTH, "--as-of", "2026-11-30", "--out", "-")
    assert code == 0, err
    assert "case HS-0007 as of 2026-11-30" in err
    code, out, err = run(capsys, "review", ws_path, LOOK_ALIKE, "--status", "acknowledged", "--note", "seen",
                         "--by", "sup", "--as-of", "2026-11-30")
    assert code == 0, err
    assert out.startswith("HS-0007: new -> acknowledged")
    code, out, err = run(capsys, "reviews", ws_path, "--case", "hs-0007")
    assert code == 0, err
    assert "1 reviewed cases" in out and "HS-0007" in out
    code, out, err = run(capsys, "audit", "show", ws_path, "--case", LOOK_ALIKE)
    assert code == 0, err
    assert "review.acknowledged" in out and "1 entries shown" in out


def test_a_near_miss_on_the_command_line_is_one_line_with_a_suggestion(ws_path, capsys):
    code, out, err = run(capsys, "history", ws_path, "HS0007", "--out", "-")
    assert code != 0
    assert err.strip().count("\n") == 0 and "did you mean 'HS-0007'?" in err and "Traceback" not in err
    code, out, err = run(capsys, "review", ws_path, "HS\t0007", "--status", "acknowledged", "--note", "x")
    assert code != 0 and err.strip().count("\n") == 0 and "control characters" in err


@pytest.mark.parametrize("typed", ["c1", " C1 ", "\uff43\uff11", "C\u200b1"])
def test_coordinator_filters_read_typed_codes_like_the_importer(ws_path, capsys, typed):
    run(capsys, "review", ws_path, "HS-0002", "--status", "acknowledged", "--note", "ok", "--by", "sup",
        "--as-of", "2026-11-30")
    code, out, err = run(capsys, "reviews", ws_path, "--coordinator", typed)
    assert code == 0, err
    assert "1 reviewed cases" in out and "HS-0002" in out


def test_an_unknown_coordinator_filter_names_the_known_ones(ws_path, capsys):
    code, out, err = run(capsys, "reviews", ws_path, "--coordinator", "C9")
    assert code != 0 and "no coordinator 'C9'" in err and "C1, C2" in err
