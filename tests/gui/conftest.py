"""GUI test fixtures: temp QSettings, the stand-in caseload, and a small real workspace."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

from caseview.dates import from_day

from .standin import AS_OF, MemorySource, make_caseload

DEMO_MODEL = Path(__file__).resolve().parents[2] / "resources" / "models" / "home_support_demo.json"


@pytest.fixture(autouse=True)
def temp_settings(tmp_path, qapp):
    from PySide6.QtCore import QSettings

    from caseview.gui.app import _pin_none

    _pin_none()  # pytest-qt made the QApplication, not caseview (see caseview.gui.app._pin_none)
    QSettings.setDefaultFormat(QSettings.IniFormat)
    QSettings.setPath(QSettings.IniFormat, QSettings.UserScope, str(tmp_path / "settings"))
    QSettings().clear()
    yield


@pytest.fixture
def window(qtbot):
    """The main window, 1400x900, shown offscreen; closed (workers cancelled and waited for) after."""
    from caseview.gui.main_window import MainWindow

    w = MainWindow(as_of=AS_OF)
    w.setProperty("quiet", True)
    qtbot.addWidget(w)
    w.resize(1400, 900)
    w.show()
    yield w
    w.close()


def open_ws(window, qtbot, path):
    """Open a workspace file in ``window`` and wait until its caseload is shown."""
    with qtbot.waitSignal(window.caseload_loaded, timeout=90000):
        assert window.open_workspace(path)
    return window.loaded


@pytest.fixture
def standin(demo_model, rng):
    return MemorySource(demo_model, make_caseload(demo_model, 300, rng))


def write_timeline_csv(path, model, caseload, n_cases=None):
    t = caseload.timelines
    names = [c.name for c in model.channels]
    with open(path, "w", newline="", encoding="utf-8") as handle:
        out = csv.writer(handle)
        out.writerow(["case_id", "date", "coordinator"] + names + list(model.covariates))
        for i in range(t.n_cases if n_cases is None else n_cases):
            for r in range(t.offsets[i], t.offsets[i + 1]):
                if not t.allowed_stages[r].all():
                    continue  # keep the CSV simple: no known-stage rows
                out.writerow([caseload.case_ids[i], from_day(int(t.times[r])).isoformat(), caseload.coordinators[i]]
                             + [caseload.raw_values[n][r] for n in names]
                             + [f"{v:g}" for v in t.covariates[r]])


@pytest.fixture
def workspace_path(tmp_path, demo_model, rng):
    """A real workspace (caseview.storage) holding 120 simulated cases."""
    import caseview.storage as storage
    import caseview.timeline_io as timeline_io
    caseload = make_caseload(demo_model, 120, rng)
    source_csv = tmp_path / "contacts.csv"
    write_timeline_csv(source_csv, demo_model, caseload)
    path = tmp_path / "team.cvw"
    ws = storage.Workspace.create(path, DEMO_MODEL.read_text(encoding="utf-8"), "tester")
    timeline_io.import_timelines(ws, source_csv, "tester")
    ws.close()
    return path
