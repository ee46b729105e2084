"""The Model tab's first page: what the model says, in sentences (the tables are one tab away)."""

from __future__ import annotations

import html

from PySide6.QtWidgets import QTextBrowser

from caseview import ADVISORY_NOTICE
from caseview.reports.model_sentences import model_sentences


class ModelSummaryView(QTextBrowser):
    """Plain-language summary of a stage model version (text only; the numbers come from the model)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setObjectName("modelSummary")
        self.setAccessibleName("What the model says, in plain words")
        self.setOpenLinks(False)
        self.setHtml("<p>No model loaded.</p>")

    def set_model(self, model, version=None) -> None:
        if model is None:
            self.setHtml("<p>No model loaded.</p>")
            return
        summary = None if version is None else version.fit_summary
        sentences = model_sentences(model, summary)
        source = ("fitted to this caseload; the ranges in brackets are 95% intervals" if summary
                  else "as entered, not fitted to this caseload yet (no ranges)")
        follow_up = ", ".join(model.follow_up_stages) or "none"

        def section(title, lines):
            if not lines:
                return ""
            items = "".join(f"<li>{html.escape(line)}</li>" for line in lines)
            return f"<h4>{html.escape(title)}</h4><ul>{items}</ul>"

        self.setHtml(
            f"<h3>What the model says</h3><p>{html.escape(model.name)} — {source}. Follow-up stages: "
            f"{html.escape(follow_up)}. These are averages over many people, to hold against your experience; "
            "they say nothing certain about any one person.</p>"
            + section("How long people stay in each stage", sentences["stays"])
            + section("What is recorded at contacts in each stage", sentences["observations"])
            + section("What speeds moves up or slows them down", sentences["effects"])
            + f"<p><i>{html.escape(ADVISORY_NOTICE)}</i></p>"
            "<p>The statistician's tables (time in stage, hazard ratios, observation probabilities, fit "
            "statistics) are on the next tabs.</p>")
