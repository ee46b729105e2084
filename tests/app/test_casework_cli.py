"""The case work commands from a subprocess, as a user runs them: each change audited and verified."""

from __future__ import annotations

import csv
import io

import pytest

from tests.app.test_cli_end_to_end import run


@pytest.fixture(scope="module")
def ws(tmp_path_factory):
    path = tmp_path_factory.mktemp("casework") / "team.cvw"
    run("demo", path)
    return path


def _verified(ws):
    proc = run("audit", "verify", ws)
    assert "intact" in proc.stdout


def _rows(text):
    return list(csv.DictReader(io.StringIO(text)))


def test_record_correct_void_contacts_close_reopen(ws, tmp_path):
    proc = run("record", ws, "HS-0004", "--date", "2026-12-01", "--value", "mobility=slow", "--value",
               "falls=several", "--by", "ann")
    assert "carried over lives_alone, balance_programme" in proc.stdout
    assert "stage probabilities on 2026-12-01: Stable" in proc.stdout and "Advisory only" in proc.stdout
    _verified(ws)
    proc = run("correct", ws, "HS-0004", "--date", "2026-12-01", "--reason", "one fall, not several",
               "--value", "falls=one", "--new-date", "2026-12-02", "--by", "bo")
    assert "now on 2026-12-02" in proc.stdout
    _verified(ws)
    run("void", ws, "HS-0004", "--date", "2026-12-02", "--reason", "wrong case", "--by", "bo")
    _verified(ws)
    out = tmp_path / "contacts.csv"
    run("contacts", ws, "HS-0004", "--all-versions", "--out", out)
    rows = _rows(out.read_text(encoding="utf-8"))
    assert list(rows[0])[:2] == ["case_id", "date"]
    assert list(rows[0])[-7:] == ["stage_known", "status", "recorded_at", "recorded_by", "reason", "changed_at",
                                  "changed_by"]
    changed = [(r["date"], r["falls"], r["status"], r["recorded_by"], r["reason"]) for r in rows
               if r["date"] >= "2026-12-01"]
    assert changed == [("2026-12-01", "several", "superseded", "ann", "one fall, not several"),
                       ("2026-12-02", "one", "voided", "bo", "wrong case")]
    exported = tmp_path / "export.csv"
    run("export", ws, "--out", exported)
    dates = {r["date"] for r in _rows(exported.read_text(encoding="utf-8")) if r["case_id"] == "HS-0004"}
    assert dates and not dates & {"2026-12-01", "2026-12-02"}  # exports hold current contacts only
    current = _rows(run("contacts", ws, "HS-0004").stdout)
    assert {r["status"] for r in current} == {"current"} and all(r["date"] < "2026-12-01" for r in current)

    run("close", ws, "HS-0004", "--date", "2026-12-03", "--reason", "moved")
    _verified(ws)
    scores = _rows(run("score", ws, "--as-of", "2026-12-10", "--out", "-").stdout)
    assert "HS-0004" not in {r["case_id"] for r in scores}
    scores = _rows(run("score", ws, "--as-of", "2026-12-10", "--out", "-", "--include-closed").stdout)
    assert "HS-0004" in {r["case_id"] for r in scores}
    flags = run("flags", ws, "--as-of", "2026-12-10", "--out", "-").stdout
    assert "HS-0004" not in flags
    run("reopen", ws, "HS-0004")
    _verified(ws)
    scores = _rows(run("score", ws, "--as-of", "2026-12-10", "--out", "-").stdout)
    assert "HS-0004" in {r["case_id"] for r in scores}


def test_new_case_and_closing_note(ws):
    proc = run("record", ws, "HS-0900", "--date", "2026-12-01", "--coordinator", "C2", "--covariate",
               "lives_alone=1", "--covariate", "balance_programme=0")
    assert "(new case)" in proc.stdout and "note: " not in proc.stdout
    _verified(ws)
    proc = run("record", ws, "HS-0900", "--date", "2026-12-20", "--stage-known", "Moved to residential care")
    assert "note: " in proc.stdout and "caseview close" in proc.stdout
    _verified(ws)


@pytest.mark.parametrize("args, fragment", [
    (("record", "HS-0005", "--date", "2026-12-01", "--value", "mobility"), "expected CHANNEL=CATEGORY"),
    (("record", "HS-0005", "--date", "01/12/2026"), "not a calendar date"),
    (("record", "HS-0999", "--date", "2026-12-01"), "give its coordinator"),
    (("correct", "HS-0005", "--date", "2026-12-01", "--reason", "x", "--value", "falls=one"), "no current contact"),
    (("void", "HS-0005", "--date", "2026-12-01", "--reason", ""), "reason is required"),
    (("close", "HS-0005", "--date", "2026-12-01", "--reason", "bored"), "invalid choice"),
    (("reopen", "HS-0005"), "not closed"),
    (("contacts", "HS-NOPE"), "no case 'HS-NOPE'"),  # the workspace's one case-ID lookup
])
def test_errors_are_one_line_and_store_nothing(ws, args, fragment):
    before = run("audit", "verify", ws).stdout
    proc = run(args[0], ws, *args[1:], ok=False)
    assert proc.returncode != 0
    assert fragment in proc.stderr and len(proc.stderr.strip().splitlines()) == 1
    assert "Traceback" not in proc.stderr
    assert run("audit", "verify", ws).stdout == before


def test_contact_kind_on_record_correct_and_contacts(ws):
    run("record", ws, "HS-0005", "--date", "2026-12-01", "--value", "falls=one", "--contact-kind", "unscheduled",
        "--by", "ann")
    run("record", ws, "HS-0005", "--date", "2026-12-02", "--value", "falls=none", "--by", "ann")
    rows = {r["date"]: r for r in _rows(run("contacts", ws, "HS-0005").stdout)}
    assert list(rows["2026-12-01"])[-8:-6] == ["contact_kind", "stage_known"]
    assert rows["2026-12-01"]["contact_kind"] == "unscheduled" and rows["2026-12-02"]["contact_kind"] == "scheduled"
    run("correct", ws, "HS-0005", "--date", "2026-12-02", "--reason", "a worried call", "--contact-kind",
        "unscheduled", "--by", "bo")
    run("correct", ws, "HS-0005", "--date", "2026-12-02", "--reason", "two falls", "--value", "falls=several",
        "--by", "bo")
    rows = [r for r in _rows(run("contacts", ws, "HS-0005", "--all-versions").stdout) if r["date"] == "2026-12-02"]
    assert [(r["status"], r["contact_kind"]) for r in rows] == [("current", "unscheduled"),
                                                                ("superseded", "unscheduled"),
                                                                ("superseded", "scheduled")]
    _verified(ws)
