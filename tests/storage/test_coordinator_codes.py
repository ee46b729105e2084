"""Coordinator codes are normalised where they enter, like case IDs (issue 12 item 4): trimmed, NFKC
(full-width), invisible characters removed, one dash; letter case kept as first seen (the stored
spelling wins) and ignored when matching."""

from __future__ import annotations

import pytest

from caseview.errors import InputError
from caseview.timeline_io import import_timelines
from caseview.timeline_io.case_ids import normalise_coordinator_code
from storage_helpers import write_csv

REST = ["normal", "none", "none", "1", "0", ""]


def _rows(triples):
    return [[case_id, date, coordinator, *REST] for case_id, date, coordinator in triples]


@pytest.mark.parametrize("typed", ["N-C1", " N-C1 ", "N\u2013C1", "\uff2e-\uff23\uff11", "N-\u200bC1"])
def test_coordinator_look_alikes_normalise_to_one(typed):
    value, why = normalise_coordinator_code(typed)
    assert (value, why) == ("N-C1", None)


def test_import_stores_one_spelling_per_coordinator(ws, tmp_path):
    import_timelines(ws, write_csv(tmp_path / "a.csv", _rows([("HS-0001", "2025-01-05", "C1")])), "tester")
    later = _rows([("HS-0001", "2025-02-05", "c1"), ("HS-0002", "2025-01-05", "\uff23\uff11"),
                   ("HS-0003", "2025-01-05", "C\u200b1"), ("HS-0004", "2025-01-05", "c2"),
                   ("HS-0004", "2025-02-05", "C2")])
    result = import_timelines(ws, write_csv(tmp_path / "b.csv", later), "tester")
    assert result.contacts_added == 5
    from caseview.storage.case_lookup import stored_coordinator_codes

    assert stored_coordinator_codes(ws.connection) == ["C1", "c2"]     # stored spelling / first seen in file
    model, _ = ws.current_model()
    caseload = ws.load_caseload(model)
    assert dict(zip(caseload.case_ids.tolist(), caseload.coordinators.tolist())) == {
        "HS-0001": "C1", "HS-0002": "C1", "HS-0003": "C1", "HS-0004": "c2"}
    assert ws.find_coordinator("C2") == "c2"


def test_coordinator_that_cannot_be_normalised_is_refused(ws, tmp_path):
    path = write_csv(tmp_path / "z.csv", _rows([("HS-0001", "2025-01-05", "C1"), ("HS-0002", "2025-01-05", "\u200b")]))
    with pytest.raises(InputError, match=r"z.csv: line 3, column 'coordinator': .*nothing is left of the coordinator"):
        import_timelines(ws, path, "tester")
    assert ws.case_count() == 0
