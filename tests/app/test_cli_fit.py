"""`caseview fit` and `caseview models` on the demo workspace (subprocess, as a user runs them)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np

from caseview.modelfile import load_model
from caseview.storage import Workspace


def run(*args):
    return subprocess.run([sys.executable, "-m", "caseview", *map(str, args)], capture_output=True, text=True,
                          timeout=600)


def test_fit_saves_a_new_current_version_and_keeps_fixed_rows(tmp_path):
    ws = tmp_path / "demo.cvw"
    assert run("demo", ws).returncode == 0
    out = tmp_path / "fitted.json"
    proc = run("fit", ws, "--starts", "1", "--out", out)
    assert proc.returncode == 0, proc.stderr
    assert "mean time in Stable" in proc.stdout and "AIC" in proc.stdout and "Advisory only" in proc.stdout
    fitted = load_model(out)
    with Workspace.open(ws) as w:
        versions = w.model_versions()
        assert [v.id for v in versions] == [1, 2] and versions[1].is_current
        start = load_model_text(versions[0].json_text)
        summary = versions[1].fit_summary
        assert np.isfinite(summary["log_likelihood"]) and summary["n_cases"] == 400
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


def load_model_text(text):
    from caseview.modelfile import parse_model

    return parse_model(text)
