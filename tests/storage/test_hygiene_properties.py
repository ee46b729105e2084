"""Property tests (hypothesis) for the hygiene rules: case-ID normalisation is idempotent and never
keeps an invisible or control character; the strict JSON reader and the workbook reader raise
nothing but InputError on any input."""

from __future__ import annotations

import tempfile
import unicodedata
import zipfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from caseview.errors import InputError
from caseview.storage import Workspace
from caseview.textfiles import decode_json
from caseview.timeline_io import import_timelines
from caseview.timeline_io.case_ids import normalise_case_id
from storage_helpers import DEMO_MODEL_PATH, HEADER, ROWS

awkward = st.text(alphabet=st.sampled_from(list("HS-0123 abcz") + ["\u200b", "\u2013", "\u2212", "\uff11", "\uff28",
                                                                     "\ufeff", "\u00ad", "\t", "\n", "\u202e",
                                                                     "\u00a0", "\u3000", "\u0301"]), max_size=12)


@settings(max_examples=300, deadline=None)
@given(text=st.one_of(awkward, st.text(max_size=12)))
def test_case_id_normalisation_is_idempotent_and_plain(text):
    value, why = normalise_case_id(text)
    if why is not None:
        assert value == ""
        return
    assert value and value == value.strip() and "  " not in value
    assert not any(unicodedata.category(c) in ("Cc", "Cf") for c in value)
    assert normalise_case_id(value) == (value, None)
    assert unicodedata.normalize("NFKC", value) == value


json_text = st.one_of(
    st.text(max_size=60),
    st.recursive(st.one_of(st.integers(), st.floats(allow_nan=False), st.text(max_size=5), st.booleans(), st.none()),
                 lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=3), inner,
                                                                                        max_size=4)),
                 max_leaves=20).map(repr),
    st.builds(lambda a, b: a + b, st.sampled_from(['{"a": 1, "a": 2}', "[" * 40, "1" * 30, "NaN", '{"x": 1e400}']),
              st.text(max_size=10)),
)


@settings(max_examples=300, deadline=None)
@given(text=json_text)
def test_strict_json_reader_raises_only_input_errors(text):
    try:
        decode_json(text, "f.json")
    except InputError as exc:
        assert str(exc).startswith("f.json: ")


def _workbook_bytes() -> bytes:
    from openpyxl import Workbook

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "w.xlsx"
        book = Workbook()
        book.active.append(HEADER)
        for r in ROWS:
            book.active.append(r)
        book.save(path)
        return path.read_bytes()


WORKBOOK = _workbook_bytes()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(position=st.integers(0, 10_000), junk=st.binary(min_size=1, max_size=40),
       part=st.sampled_from(["xl/worksheets/sheet1.xml", "xl/sharedStrings.xml", "xl/workbook.xml",
                             "xl/styles.xml", "[Content_Types].xml"]))
def test_damaged_workbook_parts_give_only_input_errors(position, junk, part):
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        source = folder / "good.xlsx"
        source.write_bytes(WORKBOOK)
        target = folder / "damaged.xlsx"
        with zipfile.ZipFile(source) as old, zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as new:
            for item in old.infolist():
                data = old.read(item.filename)
                if item.filename == part:
                    cut = position % (len(data) + 1)
                    data = data[:cut] + junk + data[cut:]
                new.writestr(item.filename, data)
        with Workspace.create(folder / "w.cvw", DEMO_MODEL_PATH.read_text(encoding="utf-8"), "tester") as ws:
            try:
                import_timelines(ws, target, "tester")
            except InputError as exc:
                assert str(exc).startswith("damaged.xlsx") and ws.contact_count() == 0
