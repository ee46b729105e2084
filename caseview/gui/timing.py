"""Measure how fast the caseload table opens, sorts and filters (for the benchmark script).

``measure_table(loaded)`` times an already scored caseload; ``measure_open_sort_filter(path)``
opens a workspace, scores it (timed separately: that runs in a worker in the window) and then
times the table.
"""

from __future__ import annotations

import datetime as dt
import os
import time


def _application():
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from .app import create_application

    return create_application(["caseview-timing"])


def measure_table(loaded) -> dict:
    """Seconds to show a :class:`LoadedCaseload` in the table and sort/filter it.

    Returns
    -------
    dict
        ``open_table`` (model + view + first paint), ``sort_<column>`` for a few columns,
        ``sort_max``, ``filter_coordinator``, ``filter_search``, ``filter_flagged``,
        ``filter_clear``, ``filter_max``, and ``n_cases``.
    """
    app = _application()
    from PySide6.QtCore import Qt

    from .caseload_model import CASE, DAYS_SINCE, LAST_CONTACT, P_REACH, STAGE
    from .caseload_panel import CaseloadPanel

    result = {"n_cases": int(loaded.scores.n_cases)}
    start = time.perf_counter()
    panel = CaseloadPanel()  # the window's own table set-up (fixed row heights, bar delegate)
    panel.resize(1400, 800)
    panel.set_caseload(loaded)
    panel.show()
    panel.grab()  # force a paint
    app.processEvents()
    result["open_table"] = time.perf_counter() - start
    model, view = panel.model, panel.table
    sorts = {"case": CASE, "last_contact": LAST_CONTACT, "days_since": DAYS_SINCE, "stage": STAGE,
             "reach_follow_up": P_REACH}
    for name, column in sorts.items():
        for order in (Qt.AscendingOrder, Qt.DescendingOrder):
            t = time.perf_counter()
            model.sort(column, order)
            view.viewport().repaint()
            key = f"sort_{name}"
            result[key] = max(result.get(key, 0.0), time.perf_counter() - t)
    result["sort_max"] = max(v for k, v in result.items() if k.startswith("sort_"))
    coordinators = model.coordinator_names()
    for name, change in (("filter_coordinator", {"coordinator": coordinators[0] if coordinators else ""}),
                         ("filter_search", {"coordinator": "", "search": "12"}),
                         ("filter_flagged", {"search": "", "flagged_only": True}),
                         ("filter_clear", {"flagged_only": False})):
        t = time.perf_counter()
        panel._filter(**change)
        view.viewport().repaint()
        result[name] = time.perf_counter() - t
    result["filter_max"] = max(v for k, v in result.items() if k.startswith("filter_"))
    panel.close()
    panel.deleteLater()
    return result


def measure_reasons(loaded) -> dict:
    """Seconds the window's background job needs for the reasons, after the table is on screen.

    Same steps as the window (:func:`caseview.gui.data_source.reason_steps`):
    ``reasons_risk_queue`` is the risk queue's rows (its first step), ``reasons_all_flagged`` the
    whole job. Empty when the assessment explains everything up front.
    """
    import numpy as np

    from caseview.followup.queue import queue_rows

    from .data_source import reason_steps
    from .risk_queue import FIRST_REASONS

    a = loaded.assessment
    if a is None:
        return {}
    queue = queue_rows(a)[:FIRST_REASONS]  # the window's first step: the top of the risk queue
    result = {"n_flagged": int(np.count_nonzero(a.is_flagged))}
    start = time.perf_counter()
    for i, rows in enumerate(reason_steps(a, queue)):
        a.explain_cases(rows)
        if i == 0:
            result["reasons_risk_queue"] = time.perf_counter() - start
    result["reasons_all_flagged"] = time.perf_counter() - start
    return result


def measure_open_sort_filter(ws_path, as_of: dt.date | None = None, horizon_days: float = 90.0) -> dict:
    """Open the workspace at ``ws_path``, score it, and time the table (see :func:`measure_table`).

    Extra keys: ``open_workspace`` (open file + read model), ``score`` (load + score + flags, the
    worker's job in the window), and :func:`measure_reasons` (the reasons job that follows).
    """
    _application()
    from .data_source import WorkspaceSource

    start = time.perf_counter()
    source = WorkspaceSource(ws_path)
    source.current_model()
    opened = time.perf_counter() - start
    t = time.perf_counter()
    loaded = source.load(as_of or dt.date.today(), horizon_days)
    scored = time.perf_counter() - t
    result = measure_table(loaded)
    result.update(open_workspace=opened, score=scored)
    result.update(measure_reasons(loaded))
    source.close()
    return result


def measure_window(ws_path, as_of: dt.date | None = None, horizon_days: float = 90.0,
                   tick_ms: int = 10, reasons_limit_s: float = 60.0) -> dict:
    """The whole window as a user meets it: open ``ws_path`` in a :class:`MainWindow` (1400x900).

    Returns
    -------
    dict
        ``window_shown``: seconds from asking for the workspace until the table, the risk queue
        and the selected case are filled and painted; ``reasons_done``: until every flagged case
        has its reasons (the background job after that); ``longest_stall``: the longest gap
        between ``tick_ms`` timer ticks in the main thread from then on (how long the window
        stopped answering at worst); ``stalls_over_100ms``: how many gaps exceeded 0.1 s.
    """
    app = _application()
    import numpy as np
    from PySide6.QtCore import QEventLoop, QTimer

    from .main_window import MainWindow

    window = MainWindow(as_of=as_of or dt.date.today())
    window.setProperty("quiet", True)
    window.resize(1400, 900)
    window.horizon_spin.blockSignals(True)   # no delayed rescore: the open below scores once
    window.horizon_spin.setValue(int(horizon_days))
    window.horizon_spin.blockSignals(False)
    window.show()
    app.processEvents()
    events = {}
    window.caseload_loaded.connect(lambda _: events.setdefault("loaded", time.perf_counter()))
    window.reasons_ready.connect(lambda _: events.setdefault("reasons", time.perf_counter()))
    window.load_failed.connect(lambda message: events.setdefault("failed", message))
    ticks = []
    timer = QTimer(interval=tick_ms, timeout=lambda: ticks.append(time.perf_counter()))
    timer.start()

    def wait_for(key, limit):
        until = time.perf_counter() + limit
        while key not in events and "failed" not in events and time.perf_counter() < until:
            app.processEvents(QEventLoop.AllEvents, 20)
            time.sleep(0.001)

    start = time.perf_counter()
    window.open_workspace(ws_path)
    wait_for("loaded", reasons_limit_s)
    if "failed" in events or "loaded" not in events:
        window.close()
        raise RuntimeError(f"the window did not load {ws_path}: {events.get('failed', 'timed out')}")
    window.grab()   # painted
    shown = time.perf_counter()
    wait_for("reasons", reasons_limit_s)
    finished = time.perf_counter()
    timer.stop()
    gaps = np.diff([t for t in ticks if t >= shown]) if ticks else np.zeros(0)
    window.close()
    return {"window_shown": shown - start, "reasons_done": finished - start,
            "longest_stall": float(gaps.max()) if gaps.size else 0.0,
            "stalls_over_100ms": int(np.count_nonzero(gaps > 0.1))}
