"""One case: stage probabilities over time, its contacts, and a what-if control."""

from __future__ import annotations

import functools
import html

import numpy as np
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QCheckBox, QDoubleSpinBox, QFormLayout, QGroupBox, QHBoxLayout, QLabel,
                               QPushButton, QSplitter, QTableWidget, QTableWidgetItem, QToolTip,
                               QVBoxLayout, QWidget)

from caseview.followup.wording import chance_words, days_ago, due_words, percent
from caseview.dates import from_day

from . import theme
from caseview.operations.case_history import case_chart_data


@functools.lru_cache(maxsize=1)
def _uncertainty_shade():
    """Colour map for the uncertainty shade: grey whose opacity grows from 0.04 to 0.26."""
    from matplotlib.colors import LinearSegmentedColormap

    grey = 0x88 / 255
    return LinearSegmentedColormap.from_list("uncertainty_shade", [(grey, grey, grey, 0.04), (grey, grey, grey, 0.26)])


PLACEHOLDER = "Select a case in the table to see its timeline."


class CaseView(QWidget):
    """Chart (matplotlib, created on first use) + contact list + what-if covariates.

    Anything that changes a case's data calls :meth:`refresh_case` (by case ID) after the new
    scores are in (:meth:`set_scores`); :meth:`clear_case` empties the pane.
    """

    whatif_changed = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.scores = None
        self.assessment = None
        self.row = -1
        self.data = None
        self.title = QLabel(PLACEHOLDER)
        self.title.setObjectName("caseTitle")
        self.title.setWordWrap(True)
        self.title.setTextFormat(Qt.RichText)
        self.why = QLabel("")
        self.why.setObjectName("caseReasons")
        self.why.setAccessibleName("Why this case is flagged, in plain words")
        self.why.setWordWrap(True)
        self.why.setTextFormat(Qt.RichText)
        self.why.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.chart_holder = QVBoxLayout()
        self.canvas = None
        self.figure = None
        self.contacts = QTableWidget(0, 1)
        self.contacts.setAccessibleName("Contacts of the selected case")
        self.contacts.verticalHeader().hide()
        self.contacts.setEditTriggers(QTableWidget.NoEditTriggers)
        self.contacts.setSelectionBehavior(QTableWidget.SelectRows)
        self.whatif_box = QGroupBox("What if… (covariates over the horizon)")
        self.whatif_box.setCheckable(True)
        self.whatif_box.setChecked(False)
        self.whatif_box.setAccessibleName("What-if forecast")
        self.whatif_form = QFormLayout(self.whatif_box)
        self.whatif_inputs = {}
        self.whatif_summary = QLabel("")
        self.whatif_summary.setWordWrap(True)
        self.whatif_box.toggled.connect(lambda _: self.refresh())

        chart_widget = QWidget()
        chart_layout = QVBoxLayout(chart_widget)
        chart_layout.setContentsMargins(0, 0, 0, 0)
        chart_layout.addWidget(self.title)
        chart_layout.addWidget(self.why)
        chart_layout.addLayout(self.chart_holder, 1)
        side = QWidget()
        side_layout = QVBoxLayout(side)
        side_layout.setContentsMargins(0, 0, 0, 0)
        side_layout.addWidget(QLabel("Contacts (recorded values; the likely stage is an estimate)"))
        side_layout.addWidget(self.contacts, 1)
        from .case_actions import CaseActions

        self.actions = CaseActions()  # case work (record, correct, void, close); see casework_controller
        side_layout.addWidget(self.actions)
        side_layout.addWidget(self.whatif_box)
        side_layout.addWidget(self.whatif_summary)
        splitter = QSplitter(Qt.Horizontal)
        splitter.addWidget(chart_widget)
        splitter.addWidget(side)
        splitter.setStretchFactor(0, 5)
        splitter.setStretchFactor(1, 2)
        side.setMaximumWidth(470)
        layout = QHBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(splitter)

    # ------------------------------------------------------------------ inputs
    def set_scores(self, scores, assessment=None) -> None:
        """A new scoring run; rebuild the what-if inputs if the covariates changed.

        The pane keeps its case but does not redraw: call :meth:`refresh_case` (the window does,
        after the table has the same run) so the pane never shows an old estimate.
        """
        self.scores = scores
        self.assessment = assessment
        names = tuple(scores.model.covariates) if scores is not None else ()
        if names != tuple(self.whatif_inputs):
            while self.whatif_form.rowCount():
                self.whatif_form.removeRow(0)
            self.whatif_inputs = {}
            for name in names:
                spin = QDoubleSpinBox()
                spin.setRange(-1e6, 1e6)
                spin.setDecimals(2)
                spin.setSingleStep(1.0)
                spin.setAccessibleName(f"What-if value of {name}")
                spin.valueChanged.connect(lambda _v: self.refresh() if self.whatif_box.isChecked() else None)
                self.whatif_form.addRow(name.replace("_", " "), spin)
                self.whatif_inputs[name] = spin

    def whatif_changes(self) -> dict:
        """Covariates whose what-if value differs from the case's last recorded value."""
        if not self.whatif_box.isChecked() or self.data is None:
            return {}
        last = self.data.covariates[-1]
        out = {}
        for k, (name, spin) in enumerate(self.whatif_inputs.items()):
            if abs(spin.value() - float(last[k])) > 1e-12:
                out[name] = spin.value()
        return out

    @property
    def case_id(self) -> str | None:
        """ID of the case shown, or None."""
        return None if self.data is None else self.data.case_id

    def refresh_case(self, case_id: str | None = None) -> bool:
        """Show ``case_id`` (default: the case shown now) from the current scores, redrawn.

        The one entry point for "this case's data changed": after an import, a recorded or
        corrected contact, a new as-of date or horizon. Clears the pane and returns False when the
        case is not in the current scores.
        """
        case_id = self.case_id if case_id is None else case_id
        row = -1 if self.scores is None or case_id is None else self.scores.row_of(str(case_id))
        if row < 0:
            self.clear_case()
            return False
        self.show_case(row)
        return True

    def clear_case(self) -> None:
        """Empty the pane (no case selected, or the selected case was filtered out)."""
        self.row = -1
        self.data = None
        self.title.setText(PLACEHOLDER)
        self.why.setText("")
        self.whatif_summary.setText("")
        self.contacts.setRowCount(0)
        if self.figure is not None:
            self.figure.clear()
            self.canvas.draw_idle()

    def show_case(self, row: int) -> None:
        if self.scores is None or not 0 <= row < self.scores.n_cases:
            self.clear_case()
            return
        self.row = row
        self.data = None
        if self.scores is not None and 0 <= row < self.scores.n_cases:
            last = self.scores.last_covariates[row]
            for k, spin in enumerate(self.whatif_inputs.values()):
                spin.blockSignals(True)
                spin.setValue(float(last[k]))
                spin.blockSignals(False)
        self.refresh()

    def show_rescored(self, row: int) -> None:
        """Like :meth:`show_case` after :meth:`set_scores`, but the chart is redrawn from the event loop,
        so the new estimate (title, reasons, contacts) is on screen at once (one case recorded at
        100,000 cases: see ``caseview.gui.casework_controller``)."""
        from PySide6.QtCore import QTimer

        if self.scores is None or not 0 <= row < self.scores.n_cases:
            self.clear_case()
            return
        self.row = row
        last = self.scores.last_covariates[row]
        for k, spin in enumerate(self.whatif_inputs.values()):
            spin.blockSignals(True)
            spin.setValue(float(last[k]))
            spin.blockSignals(False)
        self.data = case_chart_data(self.scores, row, {})
        self._fill_title()
        self._fill_contacts()
        data = self.data
        QTimer.singleShot(0, lambda: self._draw() if self.data is data else None)

    def refresh(self) -> None:
        if self.scores is None or self.row < 0 or self.row >= self.scores.n_cases:
            return
        changes = self.whatif_changes() if self.data is not None else {}
        self.data = case_chart_data(self.scores, self.row, changes)
        self._fill_title()
        self._fill_contacts()
        self._draw()
        self.whatif_changed.emit()

    # ------------------------------------------------------------------ drawing
    def _fill_title(self) -> None:
        s, r, d = self.scores, self.row, self.data
        stage = s.model.stages[int(s.most_likely_stage[r])]
        reach = float(s.p_reach_follow_up[r])
        self.title.setText(
            f"<b>{d.case_id}</b> · coordinator {s.coordinators[r] or '-'} · last contact "
            f"{from_day(s.last_contact_day[r]).isoformat()} ({days_ago(s.days_since_contact[r])}) · "
            f"most likely now: <b>{stage}</b> ({percent(s.p_now[r].max())}) · a follow-up stage within "
            f"{s.horizon_days:g} days is {chance_words(reach)} (<b>{percent(reach)}</b>)")
        self.why.setText(self._why_text(r))
        if d.whatif is not None and d.whatif_forecast is not None:
            w = d.whatif_forecast
            changes = ", ".join(f"{k.replace('_', ' ')} = {v:g}" for k, v in d.whatif_changes.items())
            self.whatif_summary.setText(
                f"What-if ({changes}): chance of being in a follow-up stage on day {s.horizon_days:g} "
                f"{percent(w.unchanged.p_follow_up_at_horizon)} → {percent(w.changed.p_follow_up_at_horizon)}; "
                f"of being in one at some time before then {percent(w.unchanged.p_reach_follow_up)} → "
                f"{percent(w.changed.p_reach_follow_up)}. Advisory estimate, not a plan of care.")
        elif self.whatif_box.isChecked():
            self.whatif_summary.setText("Change a value to see the what-if forecast.")
        else:
            self.whatif_summary.setText("")

    def _why_text(self, r: int) -> str:
        """Next contact due and, for a flagged case, why (plain sentences from the assessment)."""
        a = self.assessment
        if a is None:  # no caseload shown yet
            return ""
        due = f"Next contact due: <b>{due_words(a.next_contact_due_day[r], self.scores.as_of_day)}</b>."
        if not a.is_flagged[r]:
            return due + " Not flagged by the follow-up rules."
        if not a.has_reasons(r):
            a.explain_cases([r])  # one case, a few milliseconds (the background job may not be here yet)
        note = str(a.review_note[r])
        review = str(a.review_status[r] or "new")
        review_text = f" Review: {review}" + (f" — “{note}”" if note else "") + "."
        return f"{due} Flagged: {html.escape(str(a.reason_text[r]))}{html.escape(review_text)}"

    def _fill_contacts(self) -> None:
        d = self.data
        channels = list(d.raw[0].keys()) if d.raw else []
        headers = ["Date", "Likely stage"] + [c.replace("_", " ") for c in channels]
        self.contacts.setColumnCount(len(headers))
        self.contacts.setHorizontalHeaderLabels(headers)
        self.contacts.setRowCount(len(d.contact_days))
        for i, day in enumerate(d.contact_days):
            values = [from_day(day).isoformat(),
                      f"{d.stages[int(np.argmax(d.smoothed[i]))]} ({d.smoothed[i].max() * 100:.0f}%)"]
            values += [d.raw[i][c] or "–" for c in channels]
            for j, text in enumerate(values):
                self.contacts.setItem(i, j, QTableWidgetItem(text))
        self.contacts.resizeColumnsToContents()

    def _ensure_canvas(self):
        if self.canvas is None:
            from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
            from matplotlib.figure import Figure

            self.figure = Figure(figsize=(7, 3.6), layout="constrained")
            self.canvas = FigureCanvasQTAgg(self.figure)
            self.canvas.setAccessibleName("Stage probabilities over time for the selected case")
            self.canvas.setMinimumHeight(260)
            self.canvas.mpl_connect("motion_notify_event", self._hover)
            self.chart_holder.addWidget(self.canvas)
        return self.figure

    def _draw(self) -> None:
        figure = self._ensure_canvas()
        figure.clear()
        d = self.data
        dark = theme.is_dark()
        fg = "#E8E8E8" if dark else "#202020"
        figure.set_facecolor("#2B2B2B" if dark else "white")
        top, strip = figure.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [4, 1.3]})
        colours = theme.stage_colours(len(d.stages))
        x_contacts = d.contact_days.astype(float)
        spread_days = np.concatenate([d.now_days, d.ahead_days])
        for axis in (top, strip):
            axis.set_facecolor("#2B2B2B" if dark else "white")
            axis.tick_params(colors=fg, labelsize=8)
            for side in axis.spines.values():
                side.set_color("#777777")
        # uncertainty grows after the last contact: shade darker where the estimate says less
        # one mesh, one artist: each band between two days gets alpha 0.04 + 0.22 * spread
        top.pcolormesh(spread_days, [0.0, 1.0], np.asarray(d.spread[:-1], dtype=float)[None, :],
                       cmap=_uncertainty_shade(), vmin=0.0, vmax=1.0, shading="flat", zorder=0)
        for s, name in enumerate(d.stages):
            top.plot(x_contacts, d.smoothed[:, s], "-o", color=colours[s], lw=1.8, ms=4, label=name)
            top.plot(d.now_days, d.now[:, s], "--", color=colours[s], lw=1.6)
            top.plot(d.ahead_days, d.ahead[:, s], ":", color=colours[s], lw=1.8)
        if d.follow_up.any():
            follow_past = d.smoothed[:, d.follow_up].sum(axis=1)
            top.plot(x_contacts, follow_past, "-", color=fg, lw=2.6, alpha=0.85, label="follow-up stages")
            top.plot(d.now_days, d.now[:, d.follow_up].sum(axis=1), "--", color=fg, lw=2.4, alpha=0.85)
            top.plot(d.ahead_days, d.ahead[:, d.follow_up].sum(axis=1), ":", color=fg, lw=2.6, alpha=0.85)
            if d.whatif is not None:
                top.plot(d.ahead_days, d.whatif[:, d.follow_up].sum(axis=1), "-", color=theme.colour("whatif"),
                         lw=3.0, label="follow-up, what-if")
        top.axvline(d.as_of_day, color=theme.colour("accent"), lw=1.2)
        top.text(d.as_of_day, 0.97, " as of", color=theme.colour("accent"), fontsize=8, va="top",
                 transform=top.get_xaxis_transform())
        top.set_ylim(0, 1)
        top.set_ylabel("probability", color=fg, fontsize=9)
        top.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.005, 1.0), frameon=False, labelcolor=fg)
        top.set_title("solid: estimated at contacts · dashed: carried to the as-of date · dotted: forecast · "
                      "grey shade: uncertainty (darker = less known)", fontsize=8, color=fg, loc="left")
        # most likely path (Viterbi) as a step line, contacts as markers
        ends = np.append(x_contacts, d.as_of_day)
        strip.step(ends, np.append(d.path, d.path[-1]), where="post", color=fg, lw=1.5)
        strip.scatter(x_contacts, d.path, c=[colours[int(p)] for p in d.path], s=28, zorder=3,
                      edgecolors=fg, linewidths=0.5)
        strip.set_yticks(range(len(d.stages)))
        strip.set_yticklabels([s if len(s) < 14 else s[:12] + "…" for s in d.stages], fontsize=7)
        strip.set_ylim(len(d.stages) - 0.5, -0.5)
        strip.set_ylabel("most likely\npath", color=fg, fontsize=8)
        strip.set_title("most likely stage at each contact: an estimate, not a record", fontsize=7, color=fg,
                        loc="left")
        ticks = np.linspace(min(x_contacts[0], d.as_of_day), d.ahead_days[-1], 6)
        strip.set_xticks(ticks)
        strip.set_xticklabels([from_day(int(t)).strftime("%Y-%m-%d") for t in ticks], fontsize=8)
        self._axes = (top, strip)
        self.canvas.draw_idle()

    def _hover(self, event) -> None:
        if self.data is None or event.inaxes is None or event.xdata is None:
            return
        d = self.data
        distance = np.abs(d.contact_days - event.xdata)
        i = int(np.argmin(distance))
        span = max(1.0, float(d.ahead_days[-1] - d.contact_days[0]))
        if distance[i] > span * 0.015:
            QToolTip.hideText()
            return
        values = ", ".join(f"{k}: {v or '–'}" for k, v in d.raw[i].items())
        text = (f"{from_day(d.contact_days[i]).isoformat()}\n{values}\nmost likely stage (an estimate, not a "
                f"record): {d.stages[int(d.path[i])]}")
        from PySide6.QtGui import QCursor

        QToolTip.showText(QCursor.pos(), text, self.canvas)
