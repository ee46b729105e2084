"""The main window: advisory banner and the panels (the toolbar, menus and status bar: ``window_chrome``)."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

from PySide6.QtCore import QEventLoop, QSettings, Qt, QTimer, Signal
from PySide6.QtWidgets import QFileDialog, QLabel, QMainWindow, QMessageBox, QSplitter, QTabWidget, QVBoxLayout, QWidget

from caseview import ADVISORY_NOTICE

from . import theme, window_chrome
from .case_view import CaseView
from .caseload_panel import CaseloadPanel
from .workers import JobRunner

MAX_RECENT = 8


def current_actor() -> str:
    from caseview.attribution import os_user

    return os_user()


class MainWindow(QMainWindow):
    """caseview's window. ``caseload_loaded`` fires after every finished scoring run (the table
    shows data); ``reasons_ready`` once every flagged case's reasons have been worked out."""

    caseload_loaded = Signal(object)
    load_failed = Signal(str)
    reasons_arrived = Signal(object)  # ndarray of case rows whose reasons were just worked out
    reasons_ready = Signal(object)    # the LoadedCaseload, once every flagged case has its reasons

    def __init__(self, as_of: dt.date | None = None, parent=None):
        super().__init__(parent)
        self.setWindowTitle("caseview")
        self.setObjectName("caseviewMainWindow")
        self.source = None
        self.loaded = None
        self.actor = current_actor()
        self.jobs = JobRunner(self)
        self._pending_case = None
        window_chrome.build_top_bar(self, as_of or dt.date.today())
        self._build_body()
        window_chrome.build_status_bar(self)
        window_chrome.build_menus(self)
        from .casework_controller import CaseworkController

        self.casework = CaseworkController(self)
        from .colleague_changes import ColleagueChanges

        self.colleague_changes = ColleagueChanges(self)
        self._restore_state()

    # ------------------------------------------------------------------ building
    def _build_body(self) -> None:
        self.banner = QLabel(ADVISORY_NOTICE)
        self.banner.setObjectName("advisoryBanner")
        self.banner.setAccessibleName("Advisory notice")
        self.banner.setWordWrap(True)
        self.banner.setStyleSheet(theme.banner_style(theme.is_dark()))
        self.caseload = CaseloadPanel()
        self.case_view = CaseView()
        self.caseload.case_selected.connect(self.case_view.show_case)
        self.caseload.selection_cleared.connect(self.case_view.clear_case)
        split = QSplitter(Qt.Vertical)
        split.setObjectName("caseloadSplit")
        split.addWidget(self.caseload)
        split.addWidget(self.case_view)
        split.setStretchFactor(0, 1)
        split.setStretchFactor(1, 1)
        split.setSizes([380, 420])
        self.caseload_split = split
        from .model_panel import ModelPanel
        from .risk_queue import RiskQueue

        self.risk_queue = RiskQueue(self)
        self.risk_queue.review_saved.connect(self._review_saved)
        self.risk_queue.open_case_requested.connect(self.show_case)
        self.risk_queue.reopen_requested.connect(self.reopen_risen_flags)
        self.model_panel = ModelPanel(self)
        self.tabs = QTabWidget()
        self.tabs.setObjectName("mainTabs")
        self.tabs.addTab(split, "Caseload")
        self.tabs.addTab(self.risk_queue, theme.icon("flag"), "Risk queue")
        self.tabs.addTab(self.model_panel, theme.icon("fit"), "Model")
        from .outlook_panel import OutlookPanel

        self.outlook_panel = OutlookPanel(self)
        self.tabs.addTab(self.outlook_panel, "Outlook")
        central = QWidget()
        layout = QVBoxLayout(central)
        layout.setContentsMargins(6, 4, 6, 2)
        layout.addWidget(self.banner)
        layout.addWidget(self.tabs, 1)
        self.setCentralWidget(central)

    # ------------------------------------------------------------------ settings
    def _restore_state(self) -> None:
        # check contains() first: a missing value comes back as None, which PySide6 6.12 on
        # Python 3.11 converts with a reference-count error
        settings = QSettings()
        if settings.contains("window/geometry"):
            self.restoreGeometry(settings.value("window/geometry"))
        if settings.contains("window/state"):
            self.restoreState(settings.value("window/state"))
        if settings.contains("window/horizon"):
            horizon = settings.value("window/horizon")
            self.horizon_spin.blockSignals(True)
            self.horizon_spin.setValue(int(horizon))
            self.horizon_spin.blockSignals(False)

    def _save_state(self) -> None:
        settings = QSettings()
        settings.setValue("window/geometry", self.saveGeometry())
        settings.setValue("window/state", self.saveState())
        settings.setValue("window/horizon", self.horizon_spin.value())

    def recent_workspaces(self) -> list:
        settings = QSettings()
        value = settings.value("recent/workspaces") if settings.contains("recent/workspaces") else []
        value = value or []
        return [value] if isinstance(value, str) else list(value)

    def _remember(self, path: Path) -> None:
        recent = [str(path)] + [p for p in self.recent_workspaces() if p != str(path)]
        QSettings().setValue("recent/workspaces", recent[:MAX_RECENT])

    def fill_recent_menu(self) -> None:
        self.recent_menu.clear()
        recent = self.recent_workspaces()
        if not recent:
            self.recent_menu.addAction("(none yet)").setEnabled(False)
        for path in recent:
            self.recent_menu.addAction(path, lambda p=path: self.open_workspace(p))

    # ------------------------------------------------------------------ workspace
    @property
    def as_of(self) -> dt.date:
        d = self.as_of_edit.date()
        return dt.date(d.year(), d.month(), d.day())

    @property
    def horizon_days(self) -> float:
        return float(self.horizon_spin.value())

    def workspace(self):
        """The main-thread workspace, or None (no workspace, or an in-memory source)."""
        return self.source.workspace() if self.source is not None else None

    def open_workspace_dialog(self) -> None:
        """A workspace file or a PostgreSQL URL (see :mod:`caseview.gui.open_dialog`)."""
        from .open_dialog import OpenWorkspaceDialog

        dialog = OpenWorkspaceDialog(self, self.recent_workspaces())
        if dialog.exec() and dialog.location():
            self.open_workspace(dialog.location())

    def ask_password(self, url: str, login: str, problem: str = "") -> str | None:
        """Ask for a server's password (echo off); None when cancelled. Never stored."""
        from .open_dialog import ask_password

        return ask_password(self, url, login, problem)

    def _open_source(self, path):
        """A WorkspaceSource, asking for the server's password when it wants one (three tries)."""
        from caseview.errors import PasswordRequired

        from .data_source import WorkspaceSource

        password, problem = None, ""
        for _ in range(3):
            try:
                return WorkspaceSource(path, password=password)  # None: libpq's own sources first
            except PasswordRequired as exc:
                if exc.refused and password is not None:
                    problem = "The server refused that password; try again."
                password = self.ask_password(str(path), exc.login, problem)
                if password is None:
                    return None
        raise PasswordRequired(f"{path}: the server refused the password three times (nothing was opened)")

    def create_workspace_dialog(self) -> None:
        model_path, _ = QFileDialog.getOpenFileName(self, "Model file for the new workspace", "",
                                                    "Stage model (*.json)")
        if not model_path:
            return
        path, _ = QFileDialog.getSaveFileName(self, "New workspace", "", "caseview workspace (*.cvw)")
        if path:
            self.create_workspace(model_path, path)

    def create_workspace(self, model_path, path) -> bool:
        from caseview.errors import CaseviewError
        from caseview.modelfile import parse_model

        from caseview.storage import Workspace

        try:
            text = Path(model_path).read_text(encoding="utf-8-sig")
            parse_model(text, source=str(model_path))
            Workspace.create(path, text, self.actor).close()
        except (CaseviewError, OSError) as exc:
            self.show_error(str(exc))
            return False
        return self.open_workspace(path)

    def open_workspace(self, path, case_id: str | None = None) -> bool:
        """Open a workspace file and score it in the background."""
        from caseview.errors import CaseviewError

        try:
            source = self._open_source(path)
            if source is None:  # the password prompt was cancelled
                self.statusBar().showMessage("Nothing was opened.")
                return False
        except CaseviewError as exc:
            self.show_error(str(exc))
            return False
        from caseview.storage.location import is_database_url

        self._remember(str(path).strip() if is_database_url(path) else Path(path).resolve())  # a URL as typed
        self.set_source(source, case_id)
        for warning in source.warnings:
            self.statusBar().showMessage(warning)
        return True

    def set_source(self, source, case_id: str | None = None) -> None:
        """Show a caseload source (a workspace or, in tests, an in-memory stand-in)."""
        if self.source is not None and self.source is not source:
            self.jobs.cancel("score")
            self.jobs.cancel("reasons")
            self.source.close()
        self.source = source
        self._pending_case = case_id
        self.workspace_label.setText(f"  Workspace: {source.label}")
        self.setWindowTitle(f"caseview — {source.label}")
        self.model_panel.set_source(source)
        self.colleague_changes.start(source)  # a PostgreSQL workspace: colleagues' changes refresh their rows
        self.rescore()

    def show_case(self, case_id: str) -> bool:
        """Bring the caseload tab forward with ``case_id`` selected (filters cleared if they hide it)."""
        self.tabs.setCurrentIndex(0)
        if self.caseload.select_case(case_id):
            return True
        self.caseload.clear_filters()
        return self.caseload.select_case(case_id)

    def _select_typed_case(self, typed: str, scores) -> bool:
        """Select the case a person typed (``--case``), read like an imported case ID; the status bar
        says why when there is no such case (with the case probably meant)."""
        from caseview.errors import InputError
        from caseview.timeline_io.case_ids import match_case_id

        try:
            case_id = match_case_id(typed, scores.case_ids, f"this caseload as of {self.as_of.isoformat()}")
        except InputError as exc:
            self.statusBar().showMessage(str(exc))
            return False
        if not self.caseload.select_case(case_id):
            self.statusBar().showMessage(f"Case {case_id} is hidden by the caseload filters.")
            return False
        return True

    def reopen_risen_flags(self) -> list:
        """Re-open the dismissed flags whose risk rose (audited), then rescore to show them."""
        ws, loaded = self.workspace(), self.loaded
        if ws is None or loaded is None:
            return []
        from caseview.followup.reviews import reopen_risen
        from caseview.followup.wording import plural

        done = reopen_risen(ws, loaded.assessment)
        self.statusBar().showMessage(f"Re-opened {plural(len(done), 'dismissed flag')}: {', '.join(done)}.")
        self.rescore()
        return done

    def _review_saved(self, case_row: int, status: str, note: str) -> None:
        self.caseload.model.set_review_status(case_row, status, note)
        if self.case_view.row == case_row:
            self.case_view.refresh_case()

    # ------------------------------------------------------------------ scoring
    def rescore(self) -> None:
        if self.source is None:
            return
        source, as_of, horizon = self.source, self.as_of, self.horizon_days
        self.progress.setValue(0)
        self.progress.show()
        self.cancel_button.show()
        self.statusBar().showMessage(f"Scoring as of {as_of.isoformat()}…")
        self.jobs.cancel("reasons")
        self.reasons_status.hide()
        self.jobs.start("score", lambda callback: source.load(as_of, horizon, callback),
                        on_finished=self._scored, on_failed=self._score_failed,
                        on_progress=lambda f: self.progress.setValue(int(100 * f)),
                        on_cancelled=self._score_cancelled)

    def _job_ended(self) -> None:
        self.progress.hide()
        self.cancel_button.hide()

    def _scored(self, loaded) -> None:
        self._job_ended()
        self.loaded = loaded
        self.case_view.set_scores(loaded.scores, loaded.assessment)
        self.caseload.set_caseload(loaded)  # re-announces the selected case: the pane redraws from this run
        self.risk_queue.set_caseload(loaded)
        self.outlook_panel.caseload_loaded(loaded)
        pending, self._pending_case = self._pending_case, None
        from caseview.followup.wording import plural

        notes = " ".join(loaded.notes)
        lost = loaded.scores.unscorable.n_cases
        notes = (f"{plural(lost, 'case')} cannot be scored (see above the table). " if lost else "") + notes
        self.statusBar().showMessage(f"Scored {plural(loaded.scores.n_cases, 'case')} as of {self.as_of.isoformat()}, "
                                     f"horizon {self.horizon_days:g} days. {notes}")
        if pending:
            self._select_typed_case(pending, loaded.scores)
        self.caseload_loaded.emit(loaded)
        self._start_reasons(loaded)

    # ------------------------------------------------------------------ reasons, after the table
    #: Flagged cases explained per step of the reasons job (see ``data_source.reason_steps``).
    REASONS_PER_STEP = None

    def _start_reasons(self, loaded) -> None:
        """Work out why cases are flagged in the background: the risk queue first, then the rest.

        The table is already on screen; a case the user looks at before its turn is explained on
        the spot (one case takes a few milliseconds), see :meth:`RiskQueue.reasons_arrived`.
        """
        a = loaded.assessment
        from .data_source import REASONS_PER_STEP, full_collections_postponed, reason_steps

        from .risk_queue import FIRST_REASONS

        first = self.risk_queue.rows[:FIRST_REASONS] if self.risk_queue.loaded is loaded else []
        steps = reason_steps(a, first, self.REASONS_PER_STEP or REASONS_PER_STEP)
        if not steps:
            return
        total = int(sum(rows.size for rows in steps))

        import time

        def work(callback, publish):
            # the reasons are ~10 small objects per case: no full collections while they pile up
            with full_collections_postponed():
                done = 0
                for rows in steps:
                    callback(done / total)  # raises Cancelled once cancelled
                    a.explain_cases(rows)
                    done += rows.size
                    publish((loaded, rows, done, total))
                    time.sleep(0.002)  # let the window's thread take the interpreter lock between steps
            return loaded

        self.reasons_status.setText(f"Working out reasons: 0 of {total:,} flagged cases")
        self.reasons_status.show()
        self.jobs.start("reasons", work, on_partial=self._reasons_arrived,
                        on_finished=self._reasons_finished, on_failed=self._reasons_failed,
                        on_cancelled=lambda: self.reasons_status.hide())

    def _reasons_arrived(self, payload) -> None:
        loaded, rows, done, total = payload
        if loaded is not self.loaded:
            return
        self.reasons_status.setText(f"Working out reasons: {done:,} of {total:,} flagged cases")
        self.risk_queue.reasons_arrived(rows)
        self.reasons_arrived.emit(rows)

    def _reasons_finished(self, loaded) -> None:
        self.reasons_status.hide()
        if loaded is self.loaded:
            self.reasons_ready.emit(loaded)

    def _reasons_failed(self, message: str) -> None:
        self.reasons_status.hide()
        self.statusBar().showMessage(f"Could not work out every reason: {message}. Selecting a case still "
                                     "shows its reasons.")

    def _score_failed(self, message: str) -> None:
        self._job_ended()
        self.show_error(f"Scoring failed: {message}")
        self.load_failed.emit(message)

    def _score_cancelled(self) -> None:
        self._job_ended()
        self.statusBar().showMessage("Scoring cancelled; the table shows the previous run.")

    # ------------------------------------------------------------------ dialogs
    def import_dialog(self) -> None:
        if self.workspace() is None:
            self.show_error("Open a workspace first (Ctrl+O).")
            return
        from .import_dialog import ImportDialog

        dialog = ImportDialog(self.source, self.actor, self)
        if dialog.exec():
            self.rescore()

    def report_dialog(self) -> None:
        if self.workspace() is None:
            self.show_error("Open a workspace first (Ctrl+O).")
            return
        from .report_dialog import ReportDialog

        ReportDialog(self, self).exec()

    def show_error(self, message: str) -> None:
        """A plain message (never a traceback); offscreen it goes to the status bar only."""
        self.statusBar().showMessage(message)
        if self.isVisible() and not self.property("quiet"):
            QMessageBox.warning(self, "caseview", message)

    # ------------------------------------------------------------------ screenshots / closing
    def wait_for_jobs(self, timeout_ms: int = 120000) -> bool:
        loop = QEventLoop()
        timer = QTimer(singleShot=True, interval=timeout_ms, timeout=loop.quit)
        poll = QTimer(interval=30, timeout=lambda: loop.quit() if not self.jobs.busy() else None)
        timer.start()
        poll.start()
        if self.jobs.busy():
            loop.exec()
        poll.stop()
        # deliver queued results
        from PySide6.QtWidgets import QApplication

        for _ in range(5):
            QApplication.processEvents()
        return not self.jobs.busy()

    def render_screenshot(self, path, workspace=None, case_id=None, size=(1400, 900), tab: int = 0,
                          dialog: str | None = None) -> int:
        """Render the window (or, with ``dialog="glossary"``, the glossary dialog) to a PNG offscreen."""
        from caseview.errors import WorkspaceError

        self.setProperty("quiet", True)
        self.resize(*size)
        self.show()
        if workspace and not self.open_workspace(workspace, case_id=case_id):
            raise WorkspaceError(self.statusBar().currentMessage())
        self.wait_for_jobs()
        self.tabs.setCurrentIndex(tab)
        from PySide6.QtWidgets import QApplication

        QApplication.processEvents()
        self.wait_for_jobs()  # a panel may start work when shown (the Outlook tab)
        if self.case_view.canvas is not None:
            self.case_view.canvas.draw()
        pixmap = self.grab()
        if dialog == "glossary":
            shown = window_chrome.show_glossary(self)
            QApplication.processEvents()
            pixmap = shown.grab()
            shown.close()
        from caseview.private_files import private_output

        with private_output(path) as temporary:  # the picture shows case IDs: owner-only
            if not pixmap.save(str(temporary), "PNG"):
                raise WorkspaceError(f"{path}: cannot write the screenshot")
        self.close()
        return 0

    def closeEvent(self, event) -> None:
        self._save_state()
        self.colleague_changes.stop()
        self.jobs.shutdown()
        self.model_panel.shutdown()
        if self.source is not None:
            self.source.close()
        super().closeEvent(event)
