"""Background jobs: QThreadPool + QRunnable with a signals object.

A job runs ``function(callback)``; ``callback(fraction)`` reports progress and raises
:class:`caseview.errors.Cancelled` once the job was cancelled, so the engine stops cleanly.
A job started with ``on_partial`` runs ``function(callback, publish)`` and may hand partial
results to the window while it works (``publish(value)``, for example reasons for a few more cases).
Results and errors reach the window as signals (queued to the GUI thread). Starting a new job in
the same slot (for example "score") cancels the old one; closing the window cancels and waits.
"""

from __future__ import annotations

import sys
import threading
import traceback

from PySide6.QtCore import QObject, QRunnable, Qt, QThreadPool, Signal

from caseview.errors import Cancelled, CaseviewError


class JobSignals(QObject):
    """Signals of one job: progress(fraction), partial(value), finished(result), failed(message), cancelled()."""

    progress = Signal(float)
    partial = Signal(object)
    finished = Signal(object)
    failed = Signal(str)
    cancelled = Signal()
    done = Signal()  # always emitted last, whatever happened


class Job(QRunnable):
    """One background computation.

    Parameters
    ----------
    function : callable(callback) -> object
        Runs in a worker thread; must not touch widgets.
    name : str
        Slot name; a new job with the same name cancels this one.
    publishes : bool
        Call ``function(callback, publish)`` so it can emit partial results.
    """

    def __init__(self, function, name: str = "job", publishes: bool = False):
        super().__init__()
        self.setAutoDelete(False)
        self.function = function
        self.name = name
        self.publishes = publishes
        self.signals = JobSignals()
        self._cancel = threading.Event()
        self._finished = threading.Event()

    # called from any thread
    def cancel(self) -> None:
        self._cancel.set()

    @property
    def is_cancelled(self) -> bool:
        return self._cancel.is_set()

    @property
    def is_done(self) -> bool:
        return self._finished.is_set()

    def callback(self, fraction: float) -> None:
        if self._cancel.is_set():
            raise Cancelled("cancelled by the user")
        self.signals.progress.emit(float(fraction))

    def publish(self, value) -> None:
        """Hand a partial result to the window (dropped once the job was cancelled)."""
        if not self._cancel.is_set():
            self.signals.partial.emit(value)

    def run(self) -> None:  # worker thread
        try:
            result = self.function(self.callback, self.publish) if self.publishes else self.function(self.callback)
        except Cancelled:
            self.signals.cancelled.emit()
        except CaseviewError as exc:
            self.signals.failed.emit(str(exc))
        except Exception as exc:  # plain message, never a traceback in the window
            if self._cancel.is_set():
                self.signals.cancelled.emit()
            else:
                traceback.print_exc()
                self.signals.failed.emit(f"{type(exc).__name__}: {exc}")
        else:
            if self._cancel.is_set():
                self.signals.cancelled.emit()
            else:
                self.signals.finished.emit(result)
        finally:
            self._finished.set()
            self.signals.done.emit()


def _print_failure(name: str):
    def report(message: str) -> None:
        print(f"caseview: {name} failed: {message}", file=sys.stderr)
    return report


class JobRunner(QObject):
    """Starts jobs on a thread pool; one live job per slot name."""

    def __init__(self, parent=None, max_threads: int = 2):
        super().__init__(parent)
        self.pool = QThreadPool(self)
        self.pool.setMaxThreadCount(max_threads)
        self.jobs: dict[str, Job] = {}

    def start(self, name: str, function, on_finished=None, on_failed=None, on_progress=None,
              on_cancelled=None, on_partial=None) -> Job:
        """Cancel any job named ``name`` and start ``function(callback)`` in the pool.

        With ``on_partial`` the job runs ``function(callback, publish)``; each ``publish(value)``
        reaches ``on_partial(value)`` in the GUI thread.
        """
        old = self.jobs.get(name)
        if old is not None and not old.is_done:
            old.cancel()
        if on_failed is None:  # a failure is never silent: the window's error message, else stderr
            on_failed = getattr(self.parent(), "show_error", None) or _print_failure(name)
        job = Job(function, name, publishes=on_partial is not None)
        for signal, slot in ((job.signals.finished, on_finished), (job.signals.failed, on_failed),
                             (job.signals.progress, on_progress), (job.signals.cancelled, on_cancelled),
                             (job.signals.partial, on_partial)):
            if slot is not None:  # only the current job of a slot reaches the window
                signal.connect(self._only_if_current(name, job, slot), Qt.QueuedConnection)
        self.jobs[name] = job
        self.pool.start(job)
        return job

    def _only_if_current(self, name: str, job: Job, slot):
        def relay(*args):
            if self.jobs.get(name) is job:
                slot(*args)
        return relay

    def cancel(self, name: str) -> None:
        job = self.jobs.get(name)
        if job is not None:
            job.cancel()

    def busy(self, name: str | None = None) -> bool:
        if name is not None:
            job = self.jobs.get(name)
            return job is not None and not job.is_done
        return any(not j.is_done for j in self.jobs.values())

    def shutdown(self, timeout_ms: int = 10000) -> bool:
        """Cancel every job and wait for the pool; True if all stopped in time.

        Afterwards no job is current, so results and progress still queued in the event loop are
        dropped instead of reaching a window that is closing (and its closed workspace).
        """
        for job in self.jobs.values():
            job.cancel()
        stopped = self.pool.waitForDone(timeout_ms)
        self.jobs.clear()
        return stopped
