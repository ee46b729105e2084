"""Read the invented identifier / clean corpora and measure the screen on them.

Shared by tests/privacy and benchmarks/identifier_screen.py.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent
IDENTIFIERS_FILE = HERE / "corpus_identifiers.txt"
CLEAN_FILE = HERE / "corpus_clean.txt"


def _rows(path: Path) -> list[list[str]]:
    rows = []
    for line in path.read_text(encoding="utf-8").splitlines():
        if line.startswith("#") or not line:
            continue
        rows.append(line.split("\t"))
    return rows


def identifier_rows() -> list[tuple[str, str, str, str]]:
    """(expected_rule, role, column, value) for every identifier-like value."""
    rows = _rows(IDENTIFIERS_FILE)
    assert all(len(r) == 4 for r in rows), "corpus_identifiers.txt: expected 4 tab-separated fields"
    return [tuple(r) for r in rows]


def clean_rows() -> list[tuple[str, str, str]]:
    """(role, column, value) for every clean value."""
    rows = _rows(CLEAN_FILE)
    assert all(len(r) == 3 for r in rows), "corpus_clean.txt: expected 3 tab-separated fields"
    return [tuple(r) for r in rows]


@dataclass
class Rates:
    detected: Counter = field(default_factory=Counter)
    total: Counter = field(default_factory=Counter)
    same_rule: int = 0
    missed: list = field(default_factory=list)
    false_positives: list = field(default_factory=list)
    n_clean: int = 0

    @property
    def detection_rate(self) -> float:
        return sum(self.detected.values()) / sum(self.total.values())

    @property
    def false_positive_rate(self) -> float:
        return len(self.false_positives) / self.n_clean

    def lines(self) -> list[str]:
        out = [f"{rule:15s} {self.detected[rule]:3d}/{self.total[rule]:3d} = "
               f"{self.detected[rule] / self.total[rule]:.3f}" for rule in sorted(self.total)]
        n = sum(self.total.values())
        out.append(f"{'overall':15s} {sum(self.detected.values()):3d}/{n:3d} = {self.detection_rate:.3f}"
                   f" (same rule as expected: {self.same_rule / n:.3f})")
        out.append(f"false positives {len(self.false_positives):3d}/{self.n_clean:3d} = "
                   f"{self.false_positive_rate:.4f}")
        out += [f"  missed: {m}" for m in self.missed]
        out += [f"  false positive: {f}" for f in self.false_positives]
        return out


def measure(screen_value) -> Rates:
    """Run ``screen_value(value, role, column)`` over both corpora."""
    rates = Rates()
    for rule, role, column, value in identifier_rows():
        finding = screen_value(value, role, column)
        rates.total[rule] += 1
        if finding is None:
            rates.missed.append((rule, role, column, value))
            continue
        rates.detected[rule] += 1
        rates.same_rule += finding.rule == rule
    for role, column, value in clean_rows():
        rates.n_clean += 1
        finding = screen_value(value, role, column)
        if finding is not None:
            rates.false_positives.append((role, column, value, finding.rule))
    return rates
