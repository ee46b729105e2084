"""Soak test: several processes import and record reviews while one behaves like the window.

    PYTHONPATH=. python benchmarks/soak_workspace.py --seconds 300 [--importers 3 --reviewers 2]

Prints attempted / reported success / found / audited / integrity. Every write that reported success
must be found in the file and in the audit trail, and the file must pass ``PRAGMA integrity_check``;
the exit code is 1 otherwise. The workload is in ``tests/storage/workspace_users.py`` (shared with the
CI test ``tests/storage/test_multiprocess.py``). Not run in CI.
"""

from __future__ import annotations

import argparse
import collections
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "storage"))

import workspace_users as users  # noqa: E402


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=180.0)
    parser.add_argument("--importers", type=int, default=3)
    parser.add_argument("--reviewers", type=int, default=2)
    args = parser.parse_args(argv)
    model_text = (ROOT / "resources" / "models" / "home_support_demo.json").read_text(encoding="utf-8")
    started = time.time()
    with tempfile.TemporaryDirectory(prefix="caseview-soak-") as folder:
        counts = users.soak(folder, model_text, seconds=args.seconds, importers=args.importers,
                            reviewers=args.reviewers)
    print(f"soak: {args.importers} importers, {args.reviewers} reviewers, 1 window-like process, "
          f"{time.time() - started:.0f} s")
    print(counts.line())
    kinds = collections.Counter(r[0] for r in counts.failures)
    for kind, n in sorted(kinds.items()):
        example = next(r for r in counts.failures if r[0] == kind)
        print(f"  failed {kind}: {n} (e.g. {example[2]})")
    if counts.missing:
        print(f"  MISSING (reported success, not in the file or not audited): {counts.missing[:10]}")
    return 0 if counts.integrity == "ok" and not counts.missing else 1


if __name__ == "__main__":
    sys.exit(main())
