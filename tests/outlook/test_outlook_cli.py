"""``caseview outlook`` and ``caseview target`` as a user runs them (in-process through caseview.cli.main.main)."""

from __future__ import annotations

import csv
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from caseview import ADVISORY_NOTICE
from caseview.cli.main import main
from caseview.followup.targeting import PLANNING_NOTE
from caseview.followup.whatif import whatif_forecast
from caseview.modelfile import dump_model
from caseview.dates import parse_date
from caseview.storage import Workspace

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fitting"))
from fitting_helpers import simulate, three_stage_model  # noqa: E402

AS_OF = "2026-11-30"


def run(capsys, *argv):
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse refusals: one line, exit 2
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def demo_ws(tmp_path_factory):
    path = tmp_path_factory.mktemp("demo") / "demo.cvw"
    assert main(["demo", str(path)]) == 0
    return path


@pytest.fixture(scope="module")
def fitted_ws(tmp_path_factory):
    """A workspace whose current model was fitted by ``caseview fit`` (three invented stages)."""
    folder = tmp_path_factory.mktemp("fitted")
    model = replace(three_stage_model(), follow_up_stages=("Unwell",))
    (folder / "model.json").write_text(dump_model(model), encoding="utf-8")
    rng = np.random.default_rng(11)
    sim = simulate(model, rng, n_cases=250)
    t = sim.timelines
    start = (parse_date("2025-10-01") - parse_date("1970-01-01")).days
    with open(folder / "contacts.csv", "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["case_id", "date", "coordinator", "check", "report", "alone", "stage_known"])
        for i in range(t.n_cases):
            for j in range(t.offsets[i], t.offsets[i + 1]):
                day = np.datetime64("1970-01-01") + np.timedelta64(int(start + t.times[j] + i % 300), "D")
                values = [model.channels[c].categories[v] if v >= 0 else "" for c, v in enumerate(t.observations[j])]
                known = "|".join(s for s, a in zip(model.stages, t.allowed_stages[j]) if a)
                known = "" if t.allowed_stages[j].all() else known
                writer.writerow([f"CS-{i:04d}", str(day), f"C{i % 2 + 1}", *values, int(t.covariates[j, 0]), known])
    path = folder / "fitted.cvw"
    assert main(["init", str(path), "--model", str(folder / "model.json")]) == 0
    assert main(["import", str(path), str(folder / "contacts.csv")]) == 0
    assert main(["fit", str(path), "--calibration-draws", "0"]) in (0, 1)
    return path


def test_outlook_csv_rows_columns_and_advisory(demo_ws, tmp_path, capsys):
    out = tmp_path / "outlook.csv"
    code, text, err = run(capsys, "outlook", demo_ws, "--as-of", AS_OF, "--months", 6, "--out", out)
    assert code == 0, err
    table = pd.read_csv(out)
    assert list(table.columns) == ["date", "stage", "expected", "lower_95", "upper_95", "entries_expected", "bands", "advisory"]
    assert len(table) == 6 * 6 and set(table["advisory"]) == {ADVISORY_NOTICE}
    assert table["date"].iloc[0] == "2026-12-31" and table["date"].iloc[-1] == "2027-05-31"
    combined = table[table["stage"] == "follow-up stages"]["expected"].to_numpy()
    parts = table[table["stage"].isin(["Struggling", "Crisis"])].groupby("date")["expected"].sum().to_numpy()
    assert np.allclose(combined, parts, atol=0.02)
    assert (table["lower_95"] <= table["expected"] + 1).all() and (table["expected"] <= table["upper_95"] + 1).all()
    assert "New referrals:" in text and "first contacts" in text and ADVISORY_NOTICE in text
    code, _, _ = run(capsys, "outlook", demo_ws, "--as-of", AS_OF, "--months", 6, "--referrals", "none",
                     "--out", tmp_path / "none.csv")
    without = pd.read_csv(tmp_path / "none.csv")
    assert code == 0 and without["expected"].sum() < table["expected"].sum()


@pytest.mark.parametrize("options,message", [
    (["--months", "0"], "number of month ends: expected a whole number from 1 to 120"),
    (["--referrals", "lots"], "new referrals: expected auto, none or a number"),
    (["--referrals", "-3"], "new referrals: expected a number of referrals a month >= 0"),
    (["--draws", "2.5"], "number of parameter draws: expected a whole number"),
    (["--uncertainty", "maybe"], "parameter uncertainty: expected one of none, parameters"),
    (["--uncertainty", "parameters"], "was entered, not fitted"),
    (["--coordinator", "C9"], "no coordinator 'C9'"),
])
def test_outlook_errors_are_one_line(demo_ws, tmp_path, capsys, options, message):
    out = tmp_path / "x.csv"
    code, _, err = run(capsys, "outlook", demo_ws, "--as-of", AS_OF, *options, "--out", out)
    assert code == 2 and message in err and err.count("\n") == 1 and "Traceback" not in err
    assert not out.exists()


def test_parameter_uncertainty_widens_the_bands_and_says_how(fitted_ws, tmp_path, capsys):
    code, _, err = run(capsys, "outlook", fitted_ws, "--as-of", "2026-11-30", "--referrals", "none",
                       "--out", tmp_path / "plain.csv")
    assert code == 0, err
    code, text, err = run(capsys, "outlook", fitted_ws, "--as-of", "2026-11-30", "--referrals", "none",
                          "--uncertainty", "parameters", "--draws", "60", "--seed", "4", "--out", tmp_path / "wide.csv")
    assert code == 0, err
    plain, wide = pd.read_csv(tmp_path / "plain.csv"), pd.read_csv(tmp_path / "wide.csv")
    assert np.allclose(plain["expected"], wide["expected"])
    width = lambda t: (t["upper_95"] - t["lower_95"]).to_numpy()   # noqa: E731
    assert np.all(width(wide) >= width(plain) - 1) and width(wide).sum() > width(plain).sum()
    assert "mixture over 60 models drawn (seed 4)" in text and "multivariate normal" in text
    assert "stage probabilities now recomputed from its contacts under every drawn model" in text
    assert set(wide["bands"]) == {"mixture over 60 parameter draws (seed 4); stage probabilities now recomputed "
                                  "under each draw for every case"}
    assert set(plain["bands"]) == {"given the model; parameter uncertainty not included"}
    code, _, _ = run(capsys, "outlook", fitted_ws, "--as-of", "2026-11-30", "--referrals", "none",
                     "--uncertainty", "parameters", "--draws", "60", "--seed", "4", "--out", tmp_path / "again.csv")
    assert code == 0 and (tmp_path / "again.csv").read_bytes() == (tmp_path / "wide.csv").read_bytes()  # seeded


def test_target_ranking_matches_per_case_whatif_forecasts(demo_ws, tmp_path, capsys):
    out = tmp_path / "target.csv"
    code, text, err = run(capsys, "target", demo_ws, "--as-of", AS_OF, "--set", "balance_programme=1",
                          "--places", 15, "--horizon", 120, "--out", out)
    assert code == 0, err
    table = pd.read_csv(out)
    assert list(table.columns) == ["rank", "case_id", "coordinator", "p_reach_without", "p_reach_with", "reduction",
                                   "advisory"]
    assert len(table) == 15 and list(table["rank"]) == list(range(1, 16))
    assert (np.diff(table["reduction"]) <= 1e-4).all()
    with Workspace.open(demo_ws) as ws:
        for _, row in table.head(5).iterrows():
            w = whatif_forecast(ws, row["case_id"], parse_date(AS_OF), 120, {"balance_programme": 1.0})
            assert row["p_reach_without"] == pytest.approx(w.unchanged.p_reach_follow_up, abs=1e-4)
            assert row["p_reach_with"] == pytest.approx(w.changed.p_reach_follow_up, abs=1e-4)
    summary = pd.read_csv(tmp_path / "target_summary.csv")
    assert list(summary["choice"])[:2] == ["by benefit (this ranking)", "highest risk without the change"]
    assert summary["expected_averted"].iloc[0] == pytest.approx(table["reduction"].sum(), abs=2e-3)
    assert summary["expected_averted"].iloc[0] >= summary["expected_averted"].iloc[1:].max()
    assert summary["lower_95"].iloc[2] <= summary["expected_averted"].iloc[2] <= summary["upper_95"].iloc[2]
    assert PLANNING_NOTE in text and ADVISORY_NOTICE in text and "at random" in text


@pytest.mark.parametrize("options,message", [
    (["--set", "walks=1", "--places", "3"], "covariate 'walks': not in the model"),
    (["--set", "balance_programme=1", "--places", "0"], "number of places: expected a whole number from 1"),
    (["--set", "balance_programme=1", "--places", "3", "--horizon", "-5"], "horizon: expected a number of days > 0"),
    (["--set", "balance_programme=1", "--places", "3", "--among", "some"], "candidates: expected one of flagged, all"),
])
def test_target_errors_are_one_line(demo_ws, tmp_path, capsys, options, message):
    out = tmp_path / "t.csv"
    code, _, err = run(capsys, "target", demo_ws, "--as-of", AS_OF, *options, "--out", out)
    assert code == 2 and message in err and err.count("\n") == 1
    assert not out.exists()


def test_closed_cases_stay_out_of_the_outlook_when_the_window_shows_them(tmp_path):
    """'Show closed' puts closed cases back in the window's scores; the outlook must still leave them out,
    also after one case is rescored (the window's one-case refresh)."""
    from caseview.operations import casework
    from caseview.operations.outlook import outlook_from_scores
    from caseview.operations.single_case import rescore_one
    from caseview.scoring import score_caseload
    from caseview.followup import assess_caseload
    from caseview.gui.data_source import LoadedCaseload

    path = tmp_path / "demo.cvw"
    assert main(["demo", str(path)]) == 0
    as_of = parse_date(AS_OF)
    with Workspace.open(path) as ws:
        version = ws.current_model()[1]
        open_only = score_caseload(ws, as_of)
        closing = [str(c) for c in open_only.case_ids[:3]]
        for case_id in closing:
            casework.close_case(ws, case_id, "2026-11-01", "moved", "tester")
        without = score_caseload(ws, as_of)
        shown = score_caseload(ws, as_of, include_closed=True)
        assert shown.n_cases == without.n_cases + 3
        assert shown.is_closed is not None and int(shown.is_closed.sum()) == 3
        expected = outlook_from_scores(without, version, as_of, 3, "none", "none")
        got = outlook_from_scores(shown, version, as_of, 3, "none", "none")
        as_if_open = outlook_from_scores(replace(shown, is_closed=None), version, as_of, 3, "none", "none")
        counted_before = set(closing) & {str(c) for c in shown.case_ids[as_if_open.open_cases.rows]}
        assert counted_before and got.open_cases.n_closed == len(counted_before)
        np.testing.assert_allclose(got.expected, expected.expected, rtol=1e-12)
        assessment = assess_caseload(ws, as_of, 90.0, explain_reasons=False, reopen=False, include_closed=True)
        loaded = LoadedCaseload(assessment.scores, assessment, [], [])
        rescored, row = rescore_one(ws, loaded, closing[0], include_closed=True)
        assert row >= 0 and bool(rescored.scores.is_closed[row])
        again = outlook_from_scores(rescored.scores, version, as_of, 3, "none", "none")
        np.testing.assert_allclose(again.expected, expected.expected, rtol=1e-12)
