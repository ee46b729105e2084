"""Issue 19 item 5 in ``run_all.py``: the issue-19 commands on the PostgreSQL backend, each against its
SQLite time from the same run (target: within 1.5x), at 100,000 cases and at the large size.

One throwaway durable cluster (tests/postgres_cluster.py: fsync and synchronous commit on, a unix socket,
shared_buffers 64 MB) serves both sizes, a database per size. The caseload goes in with ``caseview init`` +
``caseview import`` of the same CSV the SQLite workspace was imported from, so both hold the same contacts
and the 1-start fits must reach the same optimum (log-likelihood within 0.01). Every command runs in a fresh
process (``measure.run_measured``: wall time, CPU time, peak RSS of the caseview process); while it runs the
server's memory is sampled (:class:`ServerMemory`) and reported beside it. After the timed import the
database is vacuumed, analysed and checkpointed, untimed (:func:`settle`). ``history`` is the median of
five runs on both backends (``scale_parts.median_run``).
"""

from __future__ import annotations

import os
import subprocess
import sys
import threading
from pathlib import Path

from measure import run_measured
from report import Row
from scale_parts import HISTORY_RUNS, median_run

#: PostgreSQL figures within this factor of SQLite's (issue 19 item 5).
POSTGRES_RATIO_LIMIT = 1.5
#: The fits on the two backends reach the same optimum within this (issue 19 item 2).
LOGLIK_TOLERANCE = 0.01


class ServerMemory:
    """Peak memory of the PostgreSQL server while a command runs: the sum of the proportional set size
    (``Pss`` of /proc/PID/smaps_rollup, Linux) of the postmaster and all its children, sampled every
    ``interval`` seconds. PSS shares each shared page among the processes mapping it, so shared_buffers is
    counted once, not once per backend as a sum of RSS would.

    Use as a context manager; ``peak_mb`` is None where /proc cannot be read.
    """

    def __init__(self, data_dir: Path, interval: float = 0.25):
        self.interval = interval
        self.peak_mb: float | None = None
        try:
            self.postmaster = int((Path(data_dir) / "postmaster.pid").read_text().split()[0])
        except (OSError, ValueError, IndexError):
            self.postmaster = None
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def _pids(self) -> list[int]:
        pids = [self.postmaster]
        for entry in os.listdir("/proc"):
            if entry.isdigit():
                try:
                    stat = Path(f"/proc/{entry}/stat").read_text()
                except OSError:
                    continue
                if int(stat.rsplit(")", 1)[1].split()[1]) == self.postmaster:   # field 4: the parent's pid
                    pids.append(int(entry))
        return pids

    def sample_mb(self) -> float | None:
        """The server's PSS now, in MB (None when it cannot be read)."""
        total_kb, seen = 0, False
        for pid in self._pids():
            try:
                for line in Path(f"/proc/{pid}/smaps_rollup").read_text().splitlines():
                    if line.startswith("Pss:"):
                        total_kb += int(line.split()[1])
                        seen = True
                        break
            except OSError:
                continue
        return total_kb / 1024.0 if seen else None

    def _sample(self) -> None:
        while True:
            value = self.sample_mb()
            if value is not None:
                self.peak_mb = value if self.peak_mb is None else max(self.peak_mb, value)
            if self._stop.wait(self.interval):
                return

    def __enter__(self) -> "ServerMemory":
        if self.postmaster is not None:
            self._thread.start()
        return self

    def __exit__(self, *exc) -> bool:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join()
        return False


class PostgresServer:
    """The run's cluster, started on first use (:meth:`cluster`) and stopped by :meth:`stop`."""

    def __init__(self, ctx):
        self.ctx = ctx
        self._cluster = None
        self.problem = ""

    def cluster(self):
        """The started cluster, or None (with :attr:`problem` saying why) when none can be started."""
        if self._cluster is not None or self.problem:
            return self._cluster
        sys.path.insert(0, str(self.ctx.here.parent / "tests"))
        try:
            from postgres_cluster import PostgresCluster, PostgresUnavailable
        except ImportError:
            self.problem = "backend not landed"
            return None
        try:
            self._cluster = PostgresCluster(durable=True).start()
        except PostgresUnavailable as exc:
            self.problem = f"no server could be started ({exc})"
        return self._cluster

    def stop(self) -> None:
        if self._cluster is not None:
            self._cluster.stop()
            self._cluster = None


def postgres_rows(ctx, server: PostgresServer, n: int, csv: Path, model: Path, case_id: str, as_of: str,
                  sqlite: dict, memory_mb: float, fit: bool = True, window: bool = True) -> None:
    """Import, score, flags, history, window open and a 1-start fit of ``n`` cases on PostgreSQL, each as
    ``x (PostgreSQL / SQLite)`` against ``sqlite`` (the seconds ``scale_parts.caseload_commands`` measured,
    with ``fit_log_likelihood``), the caseview process's peak memory against ``memory_mb`` and the server's."""
    cluster = server.cluster()
    if cluster is None:
        ctx.notes.append(f"PostgreSQL ({n:,} cases): not measured: {server.problem}")
        return
    url = cluster.create_database(f"bench{n}")
    init = subprocess.run(ctx.cv + ["init", url, "--model", str(model)], capture_output=True, text=True)
    if init.returncode:
        ctx.missing.append(f"caseview init on PostgreSQL ({n:,} cases) failed: {init.stderr.strip()}")
        return

    def measured(what: str, command: list, runs: int = 1):
        ctx.log(f"timing {what} on PostgreSQL ({n:,} cases)")
        with ServerMemory(cluster.data_dir) as server_memory:
            done = run_measured(command) if runs == 1 else median_run(command, runs)
        return done, server_memory.peak_mb

    done, server_mb = measured("caseview import", ctx.cv + ["import", url, str(csv)])
    _row(ctx, "`caseview import`", n, done.seconds if done.ok else None, sqlite.get("import"), done.peak_mb,
         memory_mb, server_mb, done.problem())
    if not done.ok:
        return
    settle(ctx, cluster, f"bench{n}")
    for name, command in (("score", ["score", url, "--as-of", as_of, "--out", str(ctx.work / f"pg_s{n}.csv")]),
                          ("flags", ["flags", url, "--as-of", as_of, "--out", str(ctx.work / f"pg_f{n}.csv")]),
                          ("history", ["history", url, case_id, "--out", str(ctx.work / f"pg_h{n}.csv")])):
        runs = HISTORY_RUNS if name == "history" else 1
        done, server_mb = measured(f"caseview {name}", ctx.cv + command, runs)
        what = f"`caseview {name}`" + (f" {case_id}, median of {runs}" if name == "history" else "")
        _row(ctx, what, n, done.seconds if done.ok or done.returncode == 4 else None, sqlite.get(name),
             done.peak_mb, memory_mb, server_mb, done.problem())
    if window:
        gui, server_mb = measured("the window's open", [ctx.python, str(ctx.here / "gui_timing.py"), url,
                                                         "--as-of", as_of])
        figures = gui.last_json_line()
        _row(ctx, "window open", n, figures.get("window_open") if gui.ok else None, sqlite.get("open"), gui.peak_mb,
             memory_mb, server_mb, gui.problem() or "no figures printed")
    if fit:
        from scale_parts import _fit_said

        done, server_mb = measured("caseview fit --starts 1", ctx.cv + ["fit", url, "--starts", "1", "--keep-current"])
        log_likelihood = _fit_said(done.stdout)[0] if done.ok else None
        theirs = sqlite.get("fit_log_likelihood")
        same = None if log_likelihood is None or theirs is None else abs(log_likelihood - theirs) <= LOGLIK_TOLERANCE
        shown = "?" if log_likelihood is None else f"{log_likelihood:,.3f}"
        _row(ctx, f"`caseview fit --starts 1` (log-likelihood {shown}; SQLite "
                  f"{'?' if theirs is None else f'{theirs:,.3f}'})", n, done.seconds if done.ok else None,
             sqlite.get("fit"), done.peak_mb, memory_mb, server_mb, done.problem())
        if same is not None:
            ctx.rows.append(Row(f"PostgreSQL: fit --starts 1, {n:,} cases, same optimum as SQLite", None, None,
                                f"|difference| <= {LOGLIK_TOLERANCE}", None,
                                figure=f"{abs(log_likelihood - theirs):.4f}", verdict=same))
    cluster.drop_database(f"bench{n}")   # the large size needs the disk


def settle(ctx, cluster, dbname: str) -> None:
    """``VACUUM (ANALYZE)`` and ``CHECKPOINT`` after the bulk import, untimed: what autovacuum and the
    checkpointer would otherwise do during the timed commands (PostgreSQL documentation, "Populating a
    Database": run ANALYZE afterwards; a spread checkpoint of the import's gigabytes made one history run
    take 1.25 s instead of about 0.5 s), so the timings are of a settled server, as a SQLite workspace is
    after its import (whose WAL is checkpointed when the import closes it: inside SQLite's import time)."""
    import time

    import psycopg

    ctx.log(f"VACUUM (ANALYZE) of {dbname} (untimed)")
    start = time.perf_counter()
    with psycopg.connect(dbname=dbname, host=str(cluster.socket_dir), user="postgres", autocommit=True) as con:
        con.execute("VACUUM (ANALYZE)")
        con.execute("CHECKPOINT")
    ctx.notes.append(f"PostgreSQL {dbname}: VACUUM (ANALYZE) after the import took {time.perf_counter() - start:.1f} s "
                     "with CHECKPOINT (untimed; autovacuum and the checkpointer would otherwise run during the timed commands)")


def _row(ctx, what: str, n: int, seconds, sqlite, peak_mb: float, memory_mb: float, server_mb, problem: str) -> None:
    label = f"PostgreSQL: {what}, {n:,} cases"
    if seconds is None or not sqlite:
        ctx.rows.append(Row(label, None, None, f"<= {POSTGRES_RATIO_LIMIT}x SQLite", None, figure="-"))
        if seconds is None:
            ctx.missing.append(f"{label} failed: {problem}")
        else:
            ctx.notes.append(f"{label}: {seconds:.2f} s, no SQLite time from this run to compare with")
        return
    ratio = seconds / sqlite
    server = "" if server_mb is None else f"; server peak {server_mb:.0f} MB"
    memory_ok = peak_mb <= memory_mb
    ctx.rows.append(Row(f"{label} ({seconds:.2f} s; SQLite {sqlite:.2f} s; peak {peak_mb:.0f} MB{server})", None, None,
                        f"<= {POSTGRES_RATIO_LIMIT}x SQLite, <= {memory_mb:.0f} MB", peak_mb, figure=f"x {ratio:.2f}",
                        verdict=ratio <= POSTGRES_RATIO_LIMIT and memory_ok))
