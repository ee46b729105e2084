"""Processes that use one workspace at once: importers, reviewers and one that behaves like the window.

Used by ``tests/storage/test_multiprocess.py`` (a few seconds, CI) and ``benchmarks/soak_workspace.py``
(minutes). Every function runs in its own process (``multiprocessing``, spawn start method) and puts
one tuple per attempted write on the queue: ``(who, key, "ok")`` when the write reported success,
``(who, key, "fail: message")`` otherwise. :func:`tally` then checks every reported success against
the file.

The window-like process keeps one connection open (the window's main-thread workspace) and opens and
closes short-lived :meth:`Workspace.open` connections beside it (the window's worker jobs), writing
now and then through the long-lived one (a review click).
"""

from __future__ import annotations

import csv
import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path

HEADER = ["case_id", "date", "coordinator", "mobility", "falls", "concern", "lives_alone", "balance_programme",
          "stage_known"]


def importer_case(who: int, batch: int, i: int) -> str:
    return f"HS-{who}{batch:03d}{i:02d}"


def _write_part(folder: Path, who: int, batch: int, cases: int) -> Path:
    path = folder / f"part-{who}-{batch}.csv"
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(HEADER)
        for i in range(cases):
            writer.writerow([importer_case(who, batch, i), f"2025-0{1 + i % 9}-1{i % 10}", "C1", "normal", "", "",
                             "0", "1", ""])
    return path


def importer(path: str, folder: str, who: int, batches: int, queue, cases: int = 5, deadline: float = 0.0) -> None:
    """Import ``batches`` small files of new cases, one short-lived workspace each (like ``caseview import``)."""
    from caseview.storage import Workspace
    from caseview.timeline_io import import_timelines

    for batch in range(batches):
        if deadline and time.time() > deadline:
            break
        part = _write_part(Path(folder), who, batch, cases)
        try:
            with Workspace.open(path) as ws:
                import_timelines(ws, part, f"importer-{who}")
            queue.put(("import", f"{who}:{batch}", "ok"))
        except Exception as exc:  # counted, not raised: the tally reports it
            queue.put(("import", f"{who}:{batch}", f"fail: {type(exc).__name__}: {exc}"))


def reviewer(path: str, who: int, rounds: int, queue, deadline: float = 0.0) -> None:
    """Record review changes on the demo-style cases ``HS-R...`` (one short-lived workspace each)."""
    from caseview.followup import record_review
    from caseview.storage import Workspace

    for k in range(rounds):
        if deadline and time.time() > deadline:
            break
        case_id = f"HS-9{who}{k % 5:02d}"
        status = "acknowledged" if (k // 5) % 2 == 0 else "actioned"
        try:
            with Workspace.open(path) as ws:
                record_review(ws, case_id, status, f"round {k}", f"reviewer-{who}", as_of=_as_of())
            queue.put(("review", f"{who}:{k}", "ok"))
        except Exception as exc:
            queue.put(("review", f"{who}:{k}", f"fail: {type(exc).__name__}: {exc}"))


def _as_of():
    import datetime as dt

    return dt.date(2025, 12, 1)


def window_like(path: str, stop, queue, write_every: int = 5, pause: float = 0.01) -> None:
    """Keep one workspace open; open/close short-lived ones beside it; write now and then through the first."""
    from caseview.storage import Workspace

    main = Workspace.open(path)
    n = 0
    try:
        while not stop.is_set():
            try:
                with Workspace.open(path) as worker:  # a worker job's own connection
                    worker.case_count()
                    worker.audit_head()
                main.case_count()
                if n % write_every == 0:
                    main.audit_append("window", "window.note", f"note-{n}", {"n": n})
                    queue.put(("window", f"note-{n}", "ok"))
            except Exception as exc:
                queue.put(("window", f"note-{n}", f"fail: {type(exc).__name__}: {exc}"))
            n += 1
            time.sleep(pause)
    finally:
        main.close()


@dataclass
class Tally:
    """Counts of one run: attempted, reported success, found in the file, audited, integrity."""

    attempted: int
    reported_ok: int
    found: int
    audited: int
    integrity: str
    failures: list
    missing: list
    by_kind: dict

    def line(self) -> str:
        kinds = ", ".join(f"{kind} {n}" for kind, n in sorted(self.by_kind.items()))
        return (f"attempted {self.attempted} ({kinds}), reported success {self.reported_ok}, found {self.found}, "
                f"audited {self.audited}, integrity {self.integrity}, failures {len(self.failures)}")


def tally(path: str, results: list, review_cases: int = 0) -> Tally:
    """Check every reported success against the file (read with plain sqlite3 after all processes ended)."""
    con = sqlite3.connect(path)
    try:
        integrity = con.execute("PRAGMA integrity_check").fetchone()[0]
        codes = {row[0] for row in con.execute("SELECT case_code FROM cases")}
        audit = con.execute("SELECT action, target, details_json FROM audit_log").fetchall()
        n_reviews = con.execute("SELECT COUNT(*) FROM reviews").fetchone()[0]
    finally:
        con.close()
    imported_files = {target for action, target, _ in audit if action.startswith("import")}
    notes = {target for action, target, _ in audit if action == "window.note"}
    review_entries = sum(1 for action, _, _ in audit if action.startswith("review."))
    ok = [r for r in results if r[2] == "ok"]
    failures = [r for r in results if r[2] != "ok"]
    found = audited = 0
    missing = []
    for kind, key, _ in ok:
        if kind == "import":
            who, batch = (int(x) for x in key.split(":"))
            present = importer_case(who, batch, 0) in codes
            logged = f"part-{who}-{batch}.csv" in imported_files
        elif kind == "window":
            present = logged = key in notes
        else:
            present = logged = True  # checked in bulk below
        found += present
        audited += logged
        if not (present and logged):
            missing.append((kind, key))
    n_review_ok = sum(1 for r in ok if r[0] == "review")
    if n_review_ok and (n_reviews != n_review_ok or review_entries != n_review_ok):
        missing.append(("review", f"{n_review_ok} reported, {n_reviews} stored, {review_entries} audited"))
        found -= n_review_ok - min(n_reviews, n_review_ok)
        audited -= n_review_ok - min(review_entries, n_review_ok)
    by_kind = {}
    for kind, _, _ in results:
        by_kind[kind] = by_kind.get(kind, 0) + 1
    return Tally(len(results), len(ok), found, audited, integrity, failures, missing, by_kind)


def soak(folder, model_text: str, seconds: float = 180.0, importers: int = 3, reviewers: int = 2) -> Tally:
    """Importers, reviewers and one window-like process on one workspace for ``seconds``; the tally."""
    import multiprocessing

    from caseview.storage import Workspace
    from caseview.timeline_io import import_timelines

    folder = Path(folder)
    path = folder / "soak.cvw"
    Workspace.create(path, model_text, "soak").close()
    seed = folder / "review-cases.csv"
    with open(seed, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(HEADER)
        for who in range(reviewers):
            for c in range(5):
                writer.writerow([f"HS-9{who}{c:02d}", "2025-03-01", "C2", "slow", "several", "serious", "1", "0", ""])
    with Workspace.open(path) as ws:
        import_timelines(ws, seed, "soak")
    ctx = multiprocessing.get_context("spawn")
    queue, stop = ctx.Queue(), ctx.Event()
    deadline = time.time() + seconds
    procs = [ctx.Process(target=importer, args=(str(path), str(folder), k, 10**6, queue, 5, deadline))
             for k in range(importers)]
    procs += [ctx.Process(target=reviewer, args=(str(path), k, 10**6, queue, deadline)) for k in range(reviewers)]
    window = ctx.Process(target=window_like, args=(str(path), stop, queue))
    window.start()
    for p in procs:
        p.start()
    results = []
    while any(p.is_alive() for p in procs) or not queue.empty():
        try:
            results.append(queue.get(timeout=1))
        except Exception:
            pass
    stop.set()
    window.join(60)
    while True:
        try:
            results.append(queue.get(timeout=0.5))
        except Exception:
            break
    return tally(str(path), results)
