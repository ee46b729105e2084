"""The CLI's column-wise CSV writer gives exactly what Python's csv module writes row by row (of the
cells after formula-like text is neutralised, which every CSV writer does)."""

from __future__ import annotations

import csv
import io
import itertools
import random

from caseview.cell_text import neutralise
from caseview.cli.basic import _csv_body


def csv_module(columns) -> str:
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows(zip(*columns))
    return buffer.getvalue()


def test_column_wise_csv_equals_csv_module_on_awkward_text():
    rng = random.Random(20261202)  # seeded; the cells mix every character that needs quoting
    alphabet = ["a", ",", '"', "\n", "\r", " ", "é", "=", "1", ".", "-", "+", "@", "\t"]
    for _ in range(300):
        n_columns, n_rows = rng.randint(2, 5), rng.randint(0, 6)
        columns = [["".join(rng.choice(alphabet) for _ in range(rng.randint(0, 4))) for _ in range(n_rows)]
                   for _ in range(n_columns)]
        assert _csv_body(columns) == csv_module([[neutralise(v, keep_numbers=True) for v in c] for c in columns])


def test_column_wise_csv_leaves_what_it_cannot_do_to_the_csv_module():
    assert _csv_body([["1", "2"], [3, 4]]) is None          # not text
    assert _csv_body([[""]]) is None                          # one column: a lone empty cell is written ""
    assert _csv_body([["a", "b"], ["c"]]) is None             # ragged
    assert _csv_body([["x"], list(itertools.repeat("y, z", 1))]) == 'x,"y, z"\n'
