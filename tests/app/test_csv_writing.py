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


def test_a_column_with_one_text_in_every_row_is_written_like_any_other():
    """Constant columns (the advisory, the as-of date) are quoted and neutralised once, then repeated."""
    for text in ("=a,\"b", "-1", "+x", "a\nb", "2028-03-21", "", "@", "plain"):
        columns = [["HS-1", "HS-2", "HS-3"], [text] * 3, list(itertools.repeat(text, 3))]
        assert _csv_body(columns) == csv_module([[neutralise(v, keep_numbers=True) for v in c] for c in columns])


def test_probabilities_are_written_exactly_as_printf_writes_them():
    import numpy as np

    from caseview.cli.basic import format_probabilities

    rng = np.random.default_rng(20261203)
    ties = (np.arange(0, 1_000_001, 997) + 0.5) / 1e6          # scaled values next to rounding ties
    values = np.concatenate([rng.random(20_000), rng.random(2_000) ** 12, ties, [0.0, 1.0, 0.5, 1e-7, 0.9999995,
                                                                               5e-7, 1.5e-6, -0.2, 1.7, np.nan]])
    # reference: C printf's "%.6f" of the value clipped to 0..1 (Python's % operator)
    assert format_probabilities(values) == ["%.6f" % v for v in np.clip(values, 0.0, 1.0)]
    assert format_probabilities([]) == []
