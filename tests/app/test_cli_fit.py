"""`caseview fit` and `caseview models` on the demo workspace (in-process through caseview.cli.main.main)."""

from __future__ import annotations

import numpy as np

from caseview.modelfile import load_model
from caseview.storage import Workspace
from cli_runner import run_cli


def run(*args):
    return run_cli(*args)


def test_fit_saves_a_new_current_version_and_keeps_fixed_rows(tmp_path):
    ws = tmp_path / "demo.cvw"
    assert run("demo", ws).returncode == 0
    out = tmp_path / "fitted.json"
    proc = run("fit", ws, "--starts", "1", "--intervals", "wald", "--calibration-draws", "0", "--out", out)
    assert proc.returncode == 0, proc.stderr
    assert "mean time in Stable" in proc.stdout and "AIC" in proc.stdout and "Advisory only" in proc.stdout
    assert "Intervals: 95% Wald (delta-method) intervals (as asked)" in proc.stdout and "(all contacts)" in proc.stdout
    fitted = load_model(out)
    with Workspace.open(ws) as w:
        versions = w.model_versions()
        assert [v.id for v in versions] == [1, 2] and versions[1].is_current
        start = load_model_text(versions[0].json_text)
        summary = versions[1].fit_summary
        assert np.isfinite(summary["log_likelihood"]) and summary["n_cases"] == 400
        assert summary["fitted_from_version"] == 1 and summary["contacts_as_of"] is None
        assert summary["interval_kind"] == "wald"
        # AIC = 2k - 2 logL (Akaike 1974)
        assert abs(summary["aic"] - (2 * summary["n_parameters"] - 2 * summary["log_likelihood"])) < 1e-6
        assert any(e.action.startswith("model.") for e in w.audit_entries())
    exit_stage = start.stage_index("Moved to residential care")
    for a, b in zip(start.channels, fitted.channels):
        np.testing.assert_array_equal(a.probabilities[exit_stage], b.probabilities[exit_stage])  # fixed rows
    listing = run("models", ws)
    assert listing.returncode == 0 and "fitted to 400 cases" in listing.stdout
    assert run("models", ws, "--use", 1).returncode == 0
    bad = run("models", ws, "--compare", 1, 2)
    assert bad.returncode == 2 and "was not fitted" in bad.stderr and "Traceback" not in bad.stderr


def test_fit_calibrates_the_interval_widths_by_bootstrap_refits_and_says_so(tmp_path):
    ws = tmp_path / "demo.cvw"
    assert run("demo", ws).returncode == 0
    proc = run("fit", ws, "--starts", "1", "--intervals", "wald", "--calibration-draws", "2")
    assert proc.returncode == 0, proc.stderr
    assert "widths calibrated by 2 bootstrap refits" in proc.stdout
    assert "calibration         widths calibrated by 2 refits of caseloads simulated from the fitted" in proc.stdout
    with Workspace.open(ws) as w:
        stored = w.model_versions()[-1].fit_summary["calibration"]
    assert stored["draws"] == 2 and stored["threshold"] >= 3.84
    refused = run("fit", ws, "--calibration-draws", "-1")
    assert refused.returncode == 2 and "calibration draws: expected a whole number from 0 to 1000, got -1" in \
        refused.stderr and "Traceback" not in refused.stderr


def test_calibration_is_the_default_below_five_thousand_cases_and_not_for_penalised_fits():
    from caseview.operations.fitting import FitOptions, default_calibration_draws

    assert default_calibration_draws(400) == 40 and default_calibration_draws(4999) == 40
    assert default_calibration_draws(5000) == 0 and default_calibration_draws(400, penalised=True) == 0
    assert FitOptions().calibration_draws_for(1000) == 40
    assert FitOptions(calibration_draws=0).calibration_draws_for(1000) == 0
    assert FitOptions(calibration_draws=7).calibration_draws_for(100_000) == 7


def test_compare_refuses_penalised_fits_and_explains_nesting_and_the_boundary(tmp_path):
    import dataclasses

    from caseview.modelfile import dump_model
    from caseview.operations.fitting import FitOptions, run_fit

    ws = tmp_path / "demo.cvw"
    assert run("demo", ws).returncode == 0
    with Workspace.open(ws) as w:
        model, _ = w.current_model()
        # a restricted model: no Slipping -> Crisis move (a rate held at 0, on the boundary)
        kept = tuple(t for t in model.transitions
                     if (model.stages[t.source], model.stages[t.target]) != ("Slipping", "Crisis"))
        restricted = dump_model(dataclasses.replace(model, transitions=kept))
        quick = FitOptions(starts=1, intervals="wald", calibration_draws=0)   # calibration: test_calibration.py
        general_fit = run_fit(w, quick, "tester")                                              # version 2
        w.add_model_version(restricted, "no Slipping -> Crisis", "tester", make_current=True)  # version 3
        restricted_fit = run_fit(w, quick, "tester")                                           # version 4
        run_fit(w, FitOptions(starts=1, intervals="wald", penalised=True), "tester")         # version 5
    assert (general_fit.version_id, restricted_fit.version_id) == (2, 4)
    compared = run("models", ws, "--compare", 2, 4)
    assert compared.returncode == 0, compared.stderr
    assert "nested: version 4 is version 2 with" in compared.stdout
    assert "likelihood-ratio test: statistic" in compared.stdout
    assert "on the boundary" in compared.stdout and "Self & Liang 1987" in compared.stdout
    penalised = run("models", ws, "--compare", 4, 5)
    assert penalised.returncode == 2 and "penalised" in penalised.stderr
    assert "not a maximum of the likelihood" in penalised.stderr and "Traceback" not in penalised.stderr
    not_nested = run("models", ws, "--compare", 1, 2)
    assert not_nested.returncode == 2 and "was not fitted" in not_nested.stderr


def load_model_text(text):
    from caseview.modelfile import parse_model

    return parse_model(text)
