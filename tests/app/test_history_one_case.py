"""``caseview history WS CASE`` reads only that case's contacts (issue 19 item 4), with the same output as before."""

from __future__ import annotations

import re

import pytest

from caseview.cli.main import main
from caseview.storage import Workspace


@pytest.fixture(scope="module")
def demo_path(tmp_path_factory):
    from caseview.cli.basic import create_demo_workspace

    path = tmp_path_factory.mktemp("history") / "demo.cvw"
    create_demo_workspace(path, "tester")
    return path


@pytest.fixture
def statements(monkeypatch):
    """Every SQL statement the command's connections run."""
    seen = []
    connect = Workspace._connect

    def traced(self):
        con = connect(self)
        con.set_trace_callback(seen.append)
        return con

    monkeypatch.setattr(Workspace, "_connect", traced)
    return seen


def _contact_reads(statements) -> list:
    return [s for s in statements if re.search(r"\bFROM (contacts|case_packs)\b", s)]


def test_history_reads_only_that_case(demo_path, statements, tmp_path, monkeypatch, capsys):
    from caseview.storage import case_packs, contacts

    def refuse(*args, **kwargs):
        raise AssertionError("history read the whole caseload")

    monkeypatch.setattr(contacts, "fetch_contacts", refuse)
    monkeypatch.setattr(case_packs, "read_case_packs", refuse)
    out = tmp_path / "h.csv"
    assert main(["history", str(demo_path), "hs-0002", "--out", str(out)]) == 0
    reads = _contact_reads(statements)
    assert reads, "the case's contacts were read"
    for statement in reads:  # each read of contacts is bound to one case (the text has the case filled in)
        assert "WHERE k.case_code = 'HS-0002'" in statement or "case_id = " in statement, statement
    import sqlite3

    con = sqlite3.connect(demo_path)
    try:  # ... and SQLite reads it through an index, never by going through every contact (SQLite, "EXPLAIN QUERY PLAN")
        for statement in reads:
            plan = " / ".join(row[-1] for row in con.execute("EXPLAIN QUERY PLAN " + statement))
            assert "SCAN" not in plan, (statement, plan)
    finally:
        con.close()
    lines = out.read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith("case_id,date,mobility,falls,concern,lives_alone,balance_programme,p_")
    assert all(line.startswith("HS-0002,") for line in lines[1:]) and len(lines) > 2


def test_history_as_of_before_the_first_contact_is_one_line(demo_path, capsys):
    assert main(["history", str(demo_path), "HS-0002", "--as-of", "2000-01-01", "--out", "-"]) != 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no contact on or before 2000-01-01" in err


def test_history_equals_the_smoothed_caseload(demo_path, tmp_path):
    """The one-case read gives what smoothing that case within the whole loaded caseload gives."""
    import numpy as np

    from hmm.inference import most_likely_path, smoothed_probabilities

    out = tmp_path / "h.csv"
    assert main(["history", str(demo_path), "HS-0007", "--out", str(out)]) == 0
    with Workspace.open(demo_path) as ws:
        model, _ = ws.current_model()
        caseload = ws.load_caseload(model)
    case = int(np.flatnonzero(caseload.case_ids == "HS-0007")[0])
    one = caseload.timelines.subset([case])
    smoothed = smoothed_probabilities(model, one)
    path = [model.stages[i] for i in most_likely_path(model, one)]
    rows = [line.split(",") for line in out.read_text(encoding="utf-8").splitlines()]
    header = rows[0]
    for k, stage in enumerate(model.stages):
        column = [float(r[header.index(f"p_{stage}")]) for r in rows[1:]]
        assert np.allclose(column, smoothed[:, k], atol=5e-7)
    assert [r[header.index("path_stage")] for r in rows[1:]] == path
