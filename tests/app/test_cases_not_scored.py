"""One bad value or record never hides the other cases (issue 12 item 3, issue 13 item 1).

Small workspaces made with the command line (in process), as a user would: a covariate typo, a
contact after a recorded move into an absorbing exact-entry stage, model values that overflow.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from caseview.cli.main import main
from caseview.errors import EXIT_CASES_NOT_SCORED
from caseview.storage import ContactBatch, Workspace
from tests.conftest import ROOT

DEMO_MODEL = ROOT / "demo_cases" / "home_support_model.json"
MOVED = "Moved to residential care"
HEADER = "case_id,date,coordinator,mobility,falls,concern,lives_alone,balance_programme,stage_known\n"
HEALTHY = [
    "HS-0001,2026-01-05,C1,normal,none,none,0,0,",
    "HS-0001,2026-03-01,C1,slow,one,some,0,0,",
    "HS-0002,2026-01-10,C2,slow,one,some,1,0,",
    "HS-0002,2026-04-02,C2,unable,several,serious,1,0,",
    "HS-0004,2026-02-01,C1,normal,none,none,0,1,",
]


def model_json(ranges: bool = True, **changes) -> dict:
    data = json.loads(DEMO_MODEL.read_text(encoding="utf-8"))
    if not ranges:
        for covariate in data["covariates"]:
            covariate.pop("range", None)
    for key, value in changes.items():
        data[key] = value
    return data


def cli(*args):
    return main([str(a) for a in args])


def make_workspace(tmp_path, rows, ranges=True, name="ws.cvw"):
    model = tmp_path / "model.json"
    model.write_text(json.dumps(model_json(ranges)), encoding="utf-8")
    path = tmp_path / name
    assert cli("init", path, "--model", model) == 0
    timelines = tmp_path / "timelines.csv"
    timelines.write_text(HEADER + "\n".join(rows) + "\n", encoding="utf-8")
    assert cli("import", path, timelines) == 0
    return path


def store_directly(path, rows):
    """Contacts written past the import checks (as a workspace from before them may hold)."""
    with Workspace.open(path) as ws:
        model, _ = ws.current_model()
        n = len(rows)
        batch = ContactBatch(
            case_codes=np.array([r[0] for r in rows], dtype=object),
            days=np.array([(np.datetime64(r[1], "D") - np.datetime64("1970-01-01", "D")).astype(int) for r in rows]),
            coordinators=np.full(n, "", dtype=object), channel_names=tuple(c.name for c in model.channels),
            channel_categories=tuple(tuple(c.categories) for c in model.channels),
            channel_values=np.full((n, len(model.channels)), -1, dtype=np.int16),
            covariate_names=tuple(model.covariates), covariates=np.array([r[2] for r in rows], dtype=float),
            stage_known=np.array([r[3] for r in rows], dtype=object))
        ws.write_contacts(batch)


def read(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return {row["case_id"]: row for row in csv.DictReader(handle)}


def score(path, tmp_path, capsys, name="scores.csv"):
    out = tmp_path / name
    code = cli("score", path, "--as-of", "2026-11-30", "--out", out)
    return code, read(out), capsys.readouterr().err


# ---------------------------------------------------------------- covariate typos
@pytest.mark.parametrize("typo", ["1000", "100000"])
def test_a_covariate_typo_marks_that_case_and_scores_the_others(tmp_path, capsys, typo):
    # Before: 1000 gave HS-0003 all-zero probabilities with exit 0; 100000 made every case fail with
    # "internal error: generator matrices must be finite".
    path = make_workspace(tmp_path, HEALTHY + [f"HS-0003,2026-02-01,C2,slow,one,none,{typo},0,",
                                               "HS-0003,2026-05-01,C2,slow,one,none,1,0,"], ranges=False)
    clean = make_workspace(tmp_path, HEALTHY, ranges=False, name="clean.cvw")
    code, rows, err = score(path, tmp_path, capsys)
    assert code == EXIT_CASES_NOT_SCORED
    assert "HS-0003" in err and "cannot be scored" in err and "lives_alone" in err
    bad = rows["HS-0003"]
    assert bad["p_Stable"] == "" and bad["most_likely_stage"] == ""
    assert bad["flags"].startswith("cannot_be_scored: numerical failure") and f"lives_alone = {typo}" in bad["flags"]
    _, alone, _ = score(clean, tmp_path, capsys, "clean.csv")
    for case in alone:                       # the others: exactly the numbers they get without HS-0003
        assert rows[case] == alone[case]


def test_import_refuses_a_covariate_outside_its_declared_range(tmp_path, capsys):
    path = make_workspace(tmp_path, HEALTHY)
    bad = tmp_path / "typo.csv"
    bad.write_text(HEADER + "HS-0009,2026-02-01,C2,slow,one,none,1000,0,\n", encoding="utf-8")
    assert cli("import", path, bad) == 2
    err = capsys.readouterr().err
    assert "line 2, column 'lives_alone'" in err and "'1000'" in err and "from 0 to 1" in err
    with Workspace.open(path) as ws:
        assert ws.case_count() == 3          # nothing stored
    assert cli("whatif", path, "--as-of", "2026-11-30", "--set", "lives_alone=1000") == 2   # the same rule
    assert "lives_alone = 1000: outside the range of lives_alone" in capsys.readouterr().err
    unranged = make_workspace(tmp_path, HEALTHY, ranges=False, name="unranged.cvw")
    assert cli("whatif", unranged, "--as-of", "2026-11-30", "--set", "lives_alone=1e6") == 2   # not silent nan
    assert "make a transition rate overflow" in capsys.readouterr().err


# ---------------------------------------------------------------- model values
@pytest.mark.parametrize("where, value, path, says", [
    ("rate", 1e100, "transitions[0].rate", "above the limit of 1e+10 per day"),
    ("effect", 800, "transitions[0].effects.lives_alone", "above the limit of 1e+10 per day"),
    ("effect", -800, "transitions[0].effects.lives_alone", "would vanish in floating point")])
def test_model_values_that_overflow_are_refused_with_their_json_path(tmp_path, capsys, where, value, path, says):
    data = model_json(ranges=value < 0)    # without a range, -1..1 is checked: -800 would overflow at -1
    if where == "rate":
        data["transitions"][0]["rate"] = value
    else:
        data["transitions"][0]["effects"]["lives_alone"] = value
    model = tmp_path / "model.json"
    model.write_text(json.dumps(data), encoding="utf-8")
    assert cli("init", tmp_path / "ws.cvw", "--model", model) == 2   # before: accepted, then all-zero scores
    err = capsys.readouterr().err
    assert f"{path}:" in err and says in err
    assert not (tmp_path / "ws.cvw").exists()


def test_a_declared_range_is_read_written_and_checked(tmp_path, capsys):
    from caseview.modelfile import dump_model, model_from_dict

    data = model_json()
    model = model_from_dict(data)
    assert model.range_of == {"lives_alone": (0.0, 1.0), "balance_programme": (0.0, 1.0)}
    assert model_from_dict(json.loads(dump_model(model))).range_of == model.range_of
    data["covariates"][0]["range"] = [0, 100]        # 0.4 per unit over 100 units: exp(40) overflows the limit
    model_file = tmp_path / "wide.json"
    model_file.write_text(json.dumps(data), encoding="utf-8")
    assert cli("init", tmp_path / "ws.cvw", "--model", model_file) == 2
    assert "transitions[0].effects.lives_alone" in capsys.readouterr().err
    data["covariates"][0]["range"] = [1, 0]
    model_file.write_text(json.dumps(data), encoding="utf-8")
    assert cli("init", tmp_path / "ws2.cvw", "--model", model_file) == 2
    assert "covariates[0].range: low must not be above high" in capsys.readouterr().err


# ---------------------------------------------------------------- contradictory records
CONTRADICTION = ["HS-0003,2026-01-05,C2,slow,one,some,0,0,",
                 f"HS-0003,2026-03-05,C2,,,,0,0,{MOVED}",
                 "HS-0003,2026-05-05,C2,slow,one,some,0,0,"]


def test_import_refuses_a_contact_after_a_recorded_absorbing_entry(tmp_path, capsys):
    path = make_workspace(tmp_path, HEALTHY)
    bad = tmp_path / "contradiction.csv"
    bad.write_text(HEADER + "\n".join(CONTRADICTION) + "\n", encoding="utf-8")
    assert cli("import", path, bad) == 2           # before: imported, then all-zero scores and never flagged
    err = capsys.readouterr().err
    assert "line 4:" in err and "2026-05-05" in err and f"entry into absorbing stage '{MOVED}' on 2026-03-05 (line 3)" \
        in err
    # the same against a stored entry record: the earlier record is named by its date
    good = tmp_path / "entry.csv"
    good.write_text(HEADER + "\n".join(CONTRADICTION[:2]) + "\n", encoding="utf-8")
    assert cli("import", path, good) == 0
    later = tmp_path / "later.csv"
    later.write_text(HEADER + CONTRADICTION[2] + "\n", encoding="utf-8")
    assert cli("import", path, later) == 2
    err = capsys.readouterr().err
    assert "line 2:" in err and "(the stored contact of 2026-03-05)" in err
    with Workspace.open(path) as ws:
        assert ws.contact_count() == len(HEALTHY) + 2


def test_shared_rule_is_what_import_and_record_call():
    from caseview.modelfile import model_from_dict
    from caseview.timeline_io.validate import contradictory_contacts

    model = model_from_dict(model_json())
    found = contradictory_contacts(model, ["A", "A", "A", "B", "B"], [10, 30, 20, 5, 6],
                                   ["", "", MOVED, MOVED, f"Crisis|{MOVED}"])
    assert [(c.case_id, c.day, c.entry_day, c.row, c.entry_row) for c in found] == [("A", 30, 20, 1, 2)]
    assert found[0].reason == ("contradictory record: contact on 1970-01-31 after the recorded entry into absorbing "
                               f"stage {MOVED} on 1970-01-21")


@pytest.fixture
def impossible_workspace(tmp_path):
    path = make_workspace(tmp_path, HEALTHY)
    store_directly(path, [("HS-0003", "2026-01-05", [0, 0], ""), ("HS-0003", "2026-03-05", [0, 0], MOVED),
                          ("HS-0003", "2026-05-05", [0, 0], "")])
    return path


def test_a_stored_contradictory_case_is_marked_in_score_flags_and_report(impossible_workspace, tmp_path, capsys):
    reason = f"contradictory record: contact on 2026-05-05 after the recorded entry into absorbing stage {MOVED} on " \
             "2026-03-05"
    code, rows, err = score(impossible_workspace, tmp_path, capsys)
    assert code == EXIT_CASES_NOT_SCORED and f"HS-0003 ({reason})" in err
    assert rows["HS-0003"]["flags"] == f"cannot_be_scored: {reason}" and rows["HS-0003"]["p_Stable"] == ""
    assert rows["HS-0003"]["most_likely_stage"] == ""   # before: all zeros and "Stable", never flagged
    assert all(rows[c]["p_Stable"] for c in ("HS-0001", "HS-0002", "HS-0004"))
    flags = tmp_path / "flags.csv"
    assert cli("flags", impossible_workspace, "--as-of", "2026-11-30", "--out", flags) == EXIT_CASES_NOT_SCORED
    listed = read(flags)
    assert listed["HS-0003"]["flags"] == "cannot_be_scored" and listed["HS-0003"]["reason"] == reason
    capsys.readouterr()
    report = tmp_path / "report.csv"
    assert cli("report", impossible_workspace, "--as-of", "2026-11-30", "--out", report) == EXIT_CASES_NOT_SCORED
    assert read(report)["HS-0003"]["flags"] == f"cannot_be_scored: {reason}"
    assert "HS-0003" in capsys.readouterr().err
    history = tmp_path / "history.csv"
    assert cli("history", impossible_workspace, "HS-0003", "--out", history) == EXIT_CASES_NOT_SCORED
    from tests.reports.reports_helpers import pdf_page_texts, squash

    pdf = tmp_path / "report.pdf"
    assert cli("report", impossible_workspace, "--as-of", "2026-11-30", "--out", pdf) == EXIT_CASES_NOT_SCORED
    cover = squash(pdf_page_texts(pdf)[0])
    assert "1 case(s) cannot be scored" in cover and squash(f"HS-0003: {reason}") in cover
    shared = tmp_path / "shared.csv"
    assert cli("report", impossible_workspace, "--as-of", "2026-11-30", "--out", shared, "--dates",
               "relative") == EXIT_CASES_NOT_SCORED
    assert "2026-" not in read(shared)["HS-0003"]["flags"]       # no calendar date in a de-identified report


def test_fit_refuses_a_workspace_holding_an_impossible_case(impossible_workspace, capsys):
    # Before: log-likelihood -inf, "converged", exit 0, the start model saved as a new version.
    assert cli("fit", impossible_workspace, "--starts", "1") == 1
    err = capsys.readouterr().err
    assert "HS-0003" in err and "contradictory record" in err and "nothing was fitted or saved" in err
    with Workspace.open(impossible_workspace) as ws:
        assert [v.id for v in ws.model_versions()] == [1]
    assert cli("check-fit", impossible_workspace, "--bootstrap", "0") == 1    # before: ran, the case included
    assert "HS-0003" in capsys.readouterr().err


def test_models_lists_and_refuses_to_compare_a_failed_fit(tmp_path, capsys):
    # Before: `caseview models` crashed formatting None ("unsupported format string passed to NoneType").
    path = make_workspace(tmp_path, HEALTHY)
    with Workspace.open(path) as ws:
        _, version = ws.current_model()
        summary = {"log_likelihood": None, "aic": None, "bic": None, "n_parameters": 40, "converged": True}
        ws.add_model_version(version.json_text, "fitted to 4 cases", "tester", fit_summary=summary)
    capsys.readouterr()
    assert cli("models", path) == 0
    listing = capsys.readouterr().out
    assert "failed" in listing.splitlines()[-1]
    assert cli("models", path, "--compare", "2", "1") == 2
    assert "model version 2 has no log-likelihood to compare (its fit failed)" in capsys.readouterr().err


def test_fit_keeps_the_covariate_range_it_saw(tmp_path, capsys):
    path = make_workspace(tmp_path, HEALTHY + ["HS-0003,2026-02-01,C2,slow,one,none,0.5,0,"], ranges=False)
    assert cli("fit", path, "--starts", "1", "--penalised") in (0, 1)
    with Workspace.open(path) as ws:
        model, version = ws.current_model()
    assert version.id == 2
    assert model.range_of == {"lives_alone": (0.0, 1.0), "balance_programme": (0.0, 1.0)}
    wider = tmp_path / "wider.csv"
    wider.write_text(HEADER + "HS-0005,2026-02-01,C2,slow,one,none,2,0,\n", encoding="utf-8")
    capsys.readouterr()
    assert cli("import", path, wider) == 2
    assert "from 0 to 1" in capsys.readouterr().err


def test_stored_values_outside_a_later_models_range_are_named_not_scored(tmp_path, capsys):
    path = make_workspace(tmp_path, HEALTHY + ["HS-0003,2026-02-01,C2,slow,one,none,2,0,"], ranges=False)
    with Workspace.open(path) as ws:
        ws.add_model_version(json.dumps(model_json(ranges=True)), "ranges declared", "tester")
    code, rows, err = score(path, tmp_path, capsys)
    assert code == EXIT_CASES_NOT_SCORED
    assert rows["HS-0003"]["flags"] == \
        "cannot_be_scored: covariate lives_alone = 2 on 2026-02-01 outside its range 0 to 1"
    assert "HS-0003 (covariate lives_alone = 2" in err
    assert all(rows[c]["p_Stable"] for c in ("HS-0001", "HS-0002", "HS-0004"))


def test_stored_contradictions_is_the_check_a_record_command_runs_in_its_transaction(impossible_workspace):
    from caseview.case_checks import stored_contradictions

    with Workspace.open(impossible_workspace) as ws:
        model, _ = ws.current_model()
        found = stored_contradictions(ws.connection, model)
        assert [(c.case_id, str(np.datetime64(c.day, "D"))) for c in found] == [("HS-0003", "2026-05-05")]
        assert stored_contradictions(ws.connection, model, ["HS-0001"]) == []


def test_a_case_impossible_from_its_first_contact_gets_its_own_reason(tmp_path, capsys):
    path = make_workspace(tmp_path, HEALTHY)
    store_directly(path, [("HS-0007", "2026-03-05", [0, 0], MOVED)])   # the demo model's initial P(moved) is 0
    code, rows, err = score(path, tmp_path, capsys)
    assert code == EXIT_CASES_NOT_SCORED
    assert rows["HS-0007"]["flags"] == ("cannot_be_scored: impossible under the current model: the first contact "
                                        f"(2026-03-05) records {MOVED}, where the model never starts a case "
                                        "(initial probability 0)")


def test_outlook_names_the_cases_it_leaves_out(impossible_workspace, tmp_path, capsys):
    # before: the outlook counted the other cases and exited 0 without naming HS-0003
    out = tmp_path / "outlook.csv"
    assert cli("outlook", impossible_workspace, "--as-of", "2026-11-30", "--months", "3", "--referrals", "none",
               "--out", out) == EXIT_CASES_NOT_SCORED
    err = capsys.readouterr().err
    assert "HS-0003" in err and "left out of the outlook" in err
    assert out.exists()
