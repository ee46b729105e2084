"""The window learns of colleagues' changes to a PostgreSQL workspace and refreshes the rows concerned.

A listener thread waits on :class:`caseview.storage.postgres_changes.ChangeFeed`; changes reach the
main thread as the ``changes_arrived`` signal, are gathered for a moment (a colleague's import sends
one notification, a burst of recorded contacts many) and then:

* changes that may touch every case (an import, a new model or rules) rescore the caseload;
* otherwise each changed case this login may see is rescored alone and its row, the case pane (if it
  shows that case) and the risk queue are updated, without moving the selection.

Changes made by this window itself are skipped (it has shown them already).
"""

from __future__ import annotations

import threading

from PySide6.QtCore import QObject, QTimer, Signal

#: How long changes are gathered before the window refreshes (ms).
GATHER_MS = 300


class ColleagueChanges(QObject):
    """Owned by the main window; listens while a PostgreSQL workspace is open.

    ``refreshed(case_ids)`` fires after the rows of those cases were refreshed (an empty list after a
    whole rescore was started).
    """

    changes_arrived = Signal(object)
    refreshed = Signal(object)

    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self._feed = None
        self._thread = None
        self._stop = threading.Event()
        self._pending: list = []
        self._timer = QTimer(self, singleShot=True, interval=GATHER_MS, timeout=self._apply)
        self.changes_arrived.connect(self._gather)

    @property
    def listening(self) -> bool:
        return self._thread is not None

    def start(self, source) -> None:
        """Listen to ``source``'s workspace when it is a PostgreSQL one (else do nothing)."""
        self.stop()
        ws = source.workspace() if source is not None else None
        if ws is None or not getattr(ws, "is_postgres", False):
            return
        from caseview.storage.postgres_changes import ChangeFeed, backend_pid

        own = {backend_pid(ws.connection)}
        try:
            self._feed = ChangeFeed(ws.path, getattr(source, "_password", None), lambda: own)
        except Exception as exc:  # the window works without live refresh; say so
            self.window.statusBar().showMessage(f"Colleagues' changes will not show until you rescore ({exc}).")
            return
        self._stop.clear()
        self._thread = threading.Thread(target=self._listen, args=(self._feed,), name="caseview-listener", daemon=True)
        self._thread.start()

    def _listen(self, feed) -> None:
        while not self._stop.is_set():
            try:
                changes = feed.wait(timeout=0.5)
            except Exception:  # the connection went away (window closing, server restart)
                return
            if changes and not self._stop.is_set():
                self.changes_arrived.emit(changes)

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
            self._thread = None
        if self._feed is not None:
            self._feed.close()
            self._feed = None
        self._pending.clear()
        self._timer.stop()

    def _gather(self, changes) -> None:
        self._pending += [c for c in changes if not c.from_this_session]
        if self._pending:
            self._timer.start()

    def _apply(self) -> None:
        changes, self._pending = self._pending, []
        window = self.window
        ws = window.workspace()
        if not changes or ws is None:
            return
        by = sorted({c.by for c in changes})
        if any(c.all_cases for c in changes) or window.loaded is None:
            window.statusBar().showMessage(f"Changes by {', '.join(by)}; rescoring the caseload…")
            window.rescore()
            self.refreshed.emit([])
            return
        from caseview.storage.postgres_changes import visible_case_codes

        keys = [k for c in changes for k in c.case_keys]
        codes = visible_case_codes(ws.connection, keys)
        for code in codes:
            window.casework.after_change(code, f"Changed by {', '.join(by)}.", select=False)
        self.refreshed.emit(codes)
