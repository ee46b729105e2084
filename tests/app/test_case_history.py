"""One case's history is one application function for both faces (issue 14 item 0/"history"):
``caseview history`` (operations.case_history.case_history) and the window's case chart
(operations.case_history.case_chart_data) give the same smoothed probabilities and path."""

from __future__ import annotations

import csv
import datetime as dt

import numpy as np
import pytest

from caseview.dates import to_day
from caseview.errors import InputError
from caseview.operations.case_history import case_chart_data, case_history
from caseview.scoring import score_caseload
from caseview.storage import Workspace
from cli_runner import run_cli

AS_OF = dt.date(2026, 11, 30)


@pytest.fixture(scope="module")
def demo_path(tmp_path_factory):
    from caseview.cli.basic import create_demo_workspace

    path = tmp_path_factory.mktemp("history") / "demo.cvw"
    create_demo_workspace(path, "tester")
    return path


def test_the_command_and_the_chart_show_the_same_history(demo_path, tmp_path):
    with Workspace.open(demo_path) as ws:
        history = case_history(ws, "hs-0042", to_day(AS_OF))   # typed in another letter case
        scores = score_caseload(ws, AS_OF, 90.0)
    chart = case_chart_data(scores, scores.row_of("HS-0042"))
    assert history.case_id == "HS-0042" and history.reason == ""
    np.testing.assert_array_equal(history.contact_days, chart.contact_days)
    np.testing.assert_array_equal(history.smoothed, chart.smoothed)
    np.testing.assert_array_equal(history.path, chart.path)
    out = tmp_path / "history.csv"
    result = run_cli("history", demo_path, "HS-0042", "--as-of", AS_OF.isoformat(), "--out", out)
    assert result.returncode == 0, result.stderr
    with open(out, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert [row["path_stage"] for row in rows] == [history.model.stages[i] for i in history.path]


def test_no_contact_before_the_as_of_date_is_refused(demo_path):
    with Workspace.open(demo_path) as ws, pytest.raises(InputError, match="HS-0042: no contact on or before 2000-01-01"):
        case_history(ws, "HS-0042", to_day(dt.date(2000, 1, 1)))
