"""The fast contact read (per-range SQL aggregates) returns exactly what the plain row-by-row read does."""

from __future__ import annotations

import numpy as np
import pytest

from storage_helpers import ROWS, generated_rows, write_csv

FIELDS = ("case_codes", "case_coordinator", "offsets", "days", "observations", "covariates", "stage_known",
          "coordinators")


def assert_same_contacts(fast, plain):
    for name in FIELDS:
        a, b = getattr(fast, name), getattr(plain, name)
        assert a.shape == b.shape, name
        if a.dtype == object:
            assert list(a) == list(b), name
        else:
            assert np.array_equal(a, b, equal_nan=True), name


@pytest.mark.parametrize("cases_per_read", [1, 3, 25_000])  # every case its own range, ragged ranges, one range
@pytest.mark.parametrize("as_of_day", [None, 20_100, 0])   # all, some, none of the contacts
def test_fast_read_equals_row_by_row_read(ws, tmp_path, rng, monkeypatch, cases_per_read, as_of_day):
    from caseview.storage import contacts
    from caseview.timeline_io import import_timelines

    rows = ROWS + [[f"HS-9{r[0][3:]}"] + r[1:] for r in generated_rows(7, 5, rng)]  # blanks, known stages
    import_timelines(ws, write_csv(tmp_path / "t.csv", rows), "tester")
    monkeypatch.setattr(contacts, "_CASES_PER_READ", cases_per_read)
    fast = contacts.fetch_contacts(ws.connection, as_of_day)
    plain = contacts.fetch_contacts(ws.connection, as_of_day, row_by_row=True)
    assert_same_contacts(fast, plain)
    if as_of_day is None:
        assert fast.days.size == len(rows)
        assert sorted(set(fast.stage_known) - {""}) == ["Stable", "Struggling|Crisis"]
        assert "" in set(fast.coordinators)  # HS-0003 has no coordinator
    if as_of_day == 0:
        assert fast.days.size == 0 and fast.case_codes.size == 0


def test_fast_read_of_an_empty_workspace(ws):
    from caseview.storage.contacts import fetch_contacts

    stored = fetch_contacts(ws.connection)
    assert stored.days.size == 0 and stored.offsets.tolist() == [0]
    assert_same_contacts(stored, fetch_contacts(ws.connection, row_by_row=True))
