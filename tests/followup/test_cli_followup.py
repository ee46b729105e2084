"""The follow-up commands as outside checks use them (in-process through caseview.cli.main.main)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from caseview import ADVISORY_NOTICE
from caseview.cli.main import main
from caseview.storage import Workspace
from followup_helpers import BAD, CALM, DEMO_MODEL_PATH, MIXED, write_workspace, run_cli

CASES = [
    ("HS-0001", "C1", [("2026-06-01", CALM, {}), ("2026-11-20", BAD, {})]),
    ("HS-0002", "C1", [("2026-06-01", CALM, {}), ("2026-11-20", CALM, {})]),
    ("HS-0003", "C2", [("2026-09-01", MIXED, {"lives_alone": 1}), ("2026-11-25", BAD, {"lives_alone": 1})]),
]


@pytest.fixture
def ws_path(tmp_path, demo_model):
    path = tmp_path / "w.cvw"
    write_workspace(path, DEMO_MODEL_PATH, demo_model, CASES).close()
    return path


run = run_cli


def test_flags_csv_and_summary(ws_path, tmp_path, capsys):
    out_csv = tmp_path / "flags.csv"
    code, out, err = run(capsys, "flags", ws_path, "--as-of", "2026-11-30", "--out", out_csv, "--save")
    assert code == 0, err
    table = pd.read_csv(out_csv)  # default options must work
    for column in ("case_id", "flags", "reason", "p_follow_up_now", "p_reach_follow_up", "next_contact_due",
                   "review_status", "reviewed_by", "reviewed_at", "coordinator", "most_likely_stage",
                   "days_since_contact", "advisory"):
        assert column in table.columns
    assert sorted(table["case_id"]) == ["HS-0001", "HS-0003"]
    assert set(table["review_status"]) == {"new"}
    assert (table["advisory"] == ADVISORY_NOTICE).all()
    assert all("in_follow_up_now" in f.split(";") for f in table["flags"])
    # plain sentences in the reason column; the numbers stay in their own columns
    assert table["reason"].str.contains(r"in a follow-up stage now \(\d+%; the threshold is 50%\)\.").all()
    assert table["reason"].str.contains(r"The contact on 2026-11-2\d \(.*\) raised this by \d+ points?\.").all()
    # already over the threshold: due on the day it got there (after the last contact), so overdue
    due = dict(zip(table["case_id"], table["next_contact_due"]))
    assert "2026-11-20" <= due["HS-0001"] < "2026-11-30" and "2026-11-25" <= due["HS-0003"] < "2026-11-30"
    assert out.rstrip().endswith(ADVISORY_NOTICE)
    assert "2 of 3 cases flagged" in out and "saved score run" in out
    with Workspace.open(ws_path) as ws:
        assert [e.action for e in ws.audit_entries()][-1] == "scores.snapshot"


def test_review_then_flags_shows_it(ws_path, tmp_path, capsys):
    code, out, err = run(capsys, "review", ws_path, "HS-0001", "--status", "acknowledged", "--note", "seen",
                         "--by", "sup1", "--as-of", "2026-11-30")
    assert code == 0, err
    assert "new -> acknowledged by sup1" in out
    code, out, err = run(capsys, "review", ws_path, "HS-0001", "--status", "dismissed", "--note", "")
    assert code == 2 and "dismissal needs a reason" in err and "Traceback" not in err
    code, out, err = run(capsys, "review", ws_path, "HS-0001", "--status", "bogus", "--note", "x")
    assert code == 2
    code, out, err = run(capsys, "review", ws_path, "HS-0404", "--status", "acknowledged", "--note", "x")
    assert code == 2 and "no case 'HS-0404'" in err
    out_csv = tmp_path / "flags.csv"
    run(capsys, "flags", ws_path, "--as-of", "2026-11-30", "--out", out_csv)
    table = pd.read_csv(out_csv).set_index("case_id")
    assert table.loc["HS-0001", "review_status"] == "acknowledged"
    assert table.loc["HS-0001", "reviewed_by"] == "sup1"
    assert table.loc["HS-0001", "review_note"] == "seen"   # the note travels with the flag
    code, out, err = run(capsys, "reviews", ws_path, "--status", "acknowledged")
    assert code == 0 and "HS-0001" in out and "sup1" in out
    code, out, err = run(capsys, "reviews", ws_path, "--coordinator", "C2")
    assert "0 reviewed cases" in out


def test_forecast_with_and_without_change(ws_path, tmp_path, capsys, demo_model):
    out_csv = tmp_path / "forecast.csv"
    code, out, err = run(capsys, "forecast", ws_path, "HS-0003", "--as-of", "2026-11-30", "--horizon", "90",
                         "--out", out_csv)
    assert code == 0, err
    plain = pd.read_csv(out_csv)
    assert list(plain["stage"]) == list(demo_model.stages)
    assert {"p_now", "p_at_horizon", "p_reach"} <= set(plain.columns)
    assert plain["p_now"].sum() == pytest.approx(1.0, abs=1e-5)
    code, out, err = run(capsys, "forecast", ws_path, "HS-0003", "--as-of", "2026-11-30", "--horizon", "90",
                         "--set", "balance_programme=1", "--out", out_csv)
    assert code == 0, err
    changed = pd.read_csv(out_csv)
    assert {"p_at_horizon_changed", "p_reach_changed"} <= set(changed.columns)
    pd.testing.assert_series_equal(changed["p_at_horizon"], plain["p_at_horizon"])
    assert out.rstrip().endswith(ADVISORY_NOTICE) and "balance_programme=1" in out
    for bad, words in (("nope=1", "not in the model"), ("balance_programme=x", "expected a number"),
                       ("balance_programme", "NAME=VALUE")):
        code, out, err = run(capsys, "forecast", ws_path, "HS-0003", "--as-of", "2026-11-30", "--set", bad,
                             "--out", out_csv)
        assert code == 2 and words in err
    code, out, err = run(capsys, "forecast", ws_path, "HS-0003", "--as-of", "30/11/2026", "--out", out_csv)
    assert code == 2 and "YYYY-MM-DD" in err


def test_whatif_counts(ws_path, capsys):
    code, out, err = run(capsys, "whatif", ws_path, "--as-of", "2026-11-30", "--set", "balance_programme=1")
    assert code == 0, err
    assert "3 cases as of 2026-11-30" in out and "without" in out
    assert out.rstrip().endswith(ADVISORY_NOTICE)


def test_rules_show_set_export_load(ws_path, tmp_path, capsys):
    code, out, err = run(capsys, "rules", ws_path)
    assert code == 0 and "in_follow_up_now" in out and "sharp_rise" in out
    exported = tmp_path / "rules.json"
    code, out, err = run(capsys, "rules", ws_path, "--set", "in_follow_up_now.threshold=0.999",
                         "--set", "likely_to_reach_follow_up.enabled=false", "--export", exported, "--by", "lead")
    assert code == 0, err
    data = json.loads(exported.read_text())
    assert data["format"] == "caseview.follow-up-rules" and data["format_version"] == 1
    by_name = {r["name"]: r for r in data["rules"]}
    assert by_name["in_follow_up_now"]["threshold"] == 0.999 and not by_name["likely_to_reach_follow_up"]["enabled"]
    with Workspace.open(ws_path) as ws:
        entry = ws.audit_entries()[-1]
        assert entry.action == "setting.change" and entry.actor == "lead"
    out_csv = tmp_path / "flags.csv"
    run(capsys, "flags", ws_path, "--as-of", "2026-11-30", "--out", out_csv)
    assert len(pd.read_csv(out_csv)) < 2  # a 0.999 threshold flags fewer of the two risky cases
    bad = tmp_path / "bad.json"
    for text, words in (
            ('{"format": "caseview.follow-up-rules", "format_version": 1, "rules": [{"name": "sharp_rise", '
             '"threshold": 1.5}]}', "rules[0].threshold (sharp_rise): expected a number between 0 and 1, got 1.5"),
            ('{"format": "caseview.follow-up-rules", "format_version": 2, "rules": []}', "update caseview"),
            ('{"format": "other", "format_version": 1, "rules": []}', "format: expected"),
            ('{"format": "caseview.follow-up-rules", "format_version": 1, "rules": [{"name": "nap"}]}',
             "unknown rule 'nap'"),
            ('{"format": "caseview.follow-up-rules", "format_version": 1, "rules": [{"name": "sharp_rise", '
             '"enabled": "yes"}]}', "rules[0].enabled: expected true or false"),
            ("{", "line 1, column 2: not valid JSON")):
        bad.write_text(text)
        code, out, err = run(capsys, "rules", ws_path, "--load", bad)
        assert code == 2 and words in err, err
    with Workspace.open(ws_path) as ws:  # refused files changed nothing
        assert ws.get_setting("follow_up_rules")["rules"][0]["threshold"] == 0.999
    code, out, err = run(capsys, "rules", ws_path, "--set", "in_follow_up_now.limit=3")
    assert code == 2 and "has no setting 'limit'" in err
    # Loading the exported file back is a no-op; loading defaults restores 0.5.
    defaults = tmp_path / "defaults.json"
    from caseview.followup.rules import default_rules, save_rule_file

    save_rule_file(default_rules(), defaults)
    code, out, err = run(capsys, "rules", ws_path, "--load", defaults)
    assert code == 0 and "rules changed" in out
    with Workspace.open(ws_path) as ws:
        assert ws.get_setting("follow_up_rules")["rules"][0]["threshold"] == 0.5
        assert ws.audit_verify().ok
