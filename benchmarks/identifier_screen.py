"""Benchmark the identifier screen: detection / false-positive rates on the invented corpora and
throughput on many distinct values.

Run: .venv/bin/python benchmarks/identifier_screen.py [--values 1000000]
Not run in CI.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "privacy"))

from identifier_corpus import measure  # noqa: E402

from caseview.privacy import screen_value, screen_values  # noqa: E402


def _time(label: str, values: list[str], role: str, column: str) -> None:
    start = time.perf_counter()
    findings = screen_values(values, role, column)
    elapsed = time.perf_counter() - start
    print(f"{label:46s} {len(values):>9,d} values  {elapsed:6.2f} s  "
          f"{len(values) / elapsed / 1e6:5.2f} M/s  findings={len(findings)}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--values", type=int, default=1_000_000, help="distinct values per run")
    args = parser.parse_args(argv)
    n = args.values

    print("Rates on the invented corpora (tests/privacy/corpus_*.txt):")
    for line in measure(screen_value).lines():
        print("  " + line)

    print("\nThroughput of screen_values (one column, distinct values):")
    _time("clean case IDs HS-000000.. (target < 3 s / 1M)", [f"HS-{i:06d}" for i in range(n)],
          "case_id", "case_id")
    _time("clean case IDs HS-2026-0001..", [f"HS-{2000 + i // 10000}-{i % 10000:04d}" for i in range(n)],
          "case_id", "case_id")
    _time("covariate decimals", [repr(i / 7)[:9] for i in range(n)], "covariate", "score")
    _time("channel words (few distinct, repeated)", ["normal", "slow", "unable", "none"] * (n // 4),
          "channel", "mobility")
    slow = max(n // 10, 1)
    _time("case IDs in a name column (full rules)", [f"HS-{i:06d}" for i in range(slow)],
          "case_id", "client_name")
    _time("free text, full rules", [f"visit {i} note ok" for i in range(slow)], "other", "notes")
    _time("phone numbers (all flagged)", [f"07700 9{i:05d}" for i in range(slow)], "other", "notes")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
