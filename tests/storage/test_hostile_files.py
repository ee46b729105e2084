"""Property tests (hypothesis): malformed and hostile timeline files never produce a traceback
(only InputError) and never a partial write. Hostile content follows OWASP "CSV Injection"
(formula cells such as =cmd|' /C calc'!A0) plus ragged rows, huge fields, control characters and
mixed encodings."""

from __future__ import annotations

import csv
import io
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from caseview.errors import InputError
from caseview.storage import Workspace
from caseview.timeline_io import import_timelines
from storage_helpers import DEMO_MODEL_PATH, HEADER, ROWS

MODEL_TEXT = DEMO_MODEL_PATH.read_text(encoding="utf-8")

hostile_text = st.one_of(
    st.sampled_from(["=cmd|' /C calc'!A0", "+1+1", "-2", "@SUM(A1:A9)", "\t=1", "\r", "\x00", "\x1b[31m",
                     "HS-0001", "2025-01-05", "2025-02-29", "normal", "none", "some", "1", "0", "nan", "1e309",
                     "", " ", "Stable|Crisis", "C1", "\u202e", "\ufeff", "jane@example.org", "555-12-3456",
                     "x" * 5000]),
    st.text(max_size=30),
    st.integers(-10**12, 10**12).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(str),
)


def _row(width):
    return st.lists(hostile_text, min_size=max(0, width - 2), max_size=width + 2)


@st.composite
def hostile_file(draw) -> bytes:
    header = draw(st.one_of(st.just(HEADER), st.lists(st.sampled_from(HEADER + ["email", "", "name"]),
                                                      min_size=1, max_size=11)))
    rows = [list(r) for r in draw(st.lists(st.sampled_from(ROWS), max_size=3))]
    rows += draw(st.lists(_row(len(header)), max_size=8))
    rows = draw(st.permutations(rows)) if rows else rows
    buffer = io.StringIO()
    writer = csv.writer(buffer, quoting=draw(st.sampled_from([csv.QUOTE_MINIMAL, csv.QUOTE_ALL])))
    writer.writerow(header)
    writer.writerows(rows)
    text = buffer.getvalue()
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "latin-1", "utf-16", "mixed"]))
    if encoding == "mixed":
        data = text.encode("utf-8") + "caf\u00e9,\u00e9\n".encode("latin-1")
    else:
        data = text.encode(encoding, errors="replace")
    if draw(st.booleans()):
        cut = draw(st.integers(0, len(data)))
        data = data[:cut] + draw(st.binary(max_size=6)) + data[cut:]
    return data


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=hostile_file())
def test_hostile_csv_only_input_errors_and_no_partial_write(data):
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        with Workspace.create(folder / "w.cvw", MODEL_TEXT, "tester") as ws:
            seed = folder / "seed.csv"
            seed.write_text(",".join(HEADER) + "\nHS-0900,2024-05-01,C1,normal,none,none,1,0,\n", encoding="utf-8")
            import_timelines(ws, seed, "tester")
            before = (ws.case_count(), ws.contact_count(), len(ws.audit_entries()))
            path = folder / "hostile.csv"
            path.write_bytes(data)
            try:
                result = import_timelines(ws, path, "tester")
            except InputError as exc:
                assert str(exc).splitlines()[0]
                assert (ws.case_count(), ws.contact_count(), len(ws.audit_entries())) == before
            else:
                assert ws.contact_count() == before[1] + result.contacts_added
                assert ws.case_count() == before[0] + result.cases_added
                model, _ = ws.current_model()
                caseload = ws.load_caseload(model)
                for code in caseload.case_ids.tolist():
                    assert not code.startswith(("=", "+", "-", "@")) and code == code.strip()
            assert ws.integrity_check() == "ok" and ws.audit_verify().ok


@settings(max_examples=40, deadline=None)
@given(cells=st.lists(st.lists(hostile_text, min_size=9, max_size=9), min_size=1, max_size=5))
def test_hostile_xlsx_only_input_errors(cells):
    from openpyxl import Workbook

    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        book = Workbook()
        sheet = book.active
        sheet.append(HEADER)
        for row in cells:
            # openpyxl refuses control characters in cells; a real file could not hold them either
            sheet.append([c if not any(ord(ch) < 32 for ch in c) else "bad" for c in row])
        path = folder / "hostile.xlsx"
        book.save(path)
        with Workspace.create(folder / "w.cvw", MODEL_TEXT, "tester") as ws:
            try:
                import_timelines(ws, path, "tester")
            except InputError:
                assert ws.contact_count() == 0 and ws.case_count() == 0
            assert ws.integrity_check() == "ok"
