"""Help > Glossary: a short explanation of every term the window shows, for people without statistics
training. The texts are plain data (:data:`GLOSSARY`) so tests can hold the window's words against them."""

from __future__ import annotations

import html

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QLineEdit, QTextBrowser, QVBoxLayout

from caseview import ADVISORY_NOTICE
from caseview.followup.wording import CHANCE_BANDS

def _band_text() -> str:
    """'very likely: 90% and over; likely: 65% to 89%; ...' from the bands themselves."""
    parts = []
    for i, (low, words) in enumerate(CHANCE_BANDS):
        upto = "and over" if i == 0 else f"to {CHANCE_BANDS[i - 1][0] * 100 - 1:.0f}%"
        parts.append(f"{words}: {low * 100:.0f}% {upto}")
    return "; ".join(parts)


_BANDS = _band_text()

#: (term, explanation), in the order a new user meets them.
GLOSSARY = (
    ("advisory", "Everything caseview shows is an estimate from a statistical model, to help decide whom to "
                 "contact first. " + ADVISORY_NOTICE),
    ("case", "One person supported by the service, shown by a code, never by name."),
    ("contact", "A visit, call or meeting with a recorded date and what was observed."),
    ("coordinator", "The care coordinator responsible for the case at its last contact."),
    ("as-of date", "The day the estimates are for. Only contacts on or before it are used. Change it in the "
                   "toolbar and press Enter to rescore."),
    ("stage", "A step in how a person's situation develops (for example Stable, Slipping, Crisis). Stages cannot "
              "be seen directly; the model estimates them from what is recorded at contacts."),
    ("follow-up stage", "A stage the service wants to act on (marked in the model). 'Follow-up now' is the chance "
                        "of being in any follow-up stage on the as-of date."),
    ("most likely stage", "The stage with the highest chance on the as-of date, with that chance in brackets. "
                          "Other stages may still be quite likely."),
    ("chance words", "How the window puts a chance into words (caseview's own bands): " + _BANDS + ". The "
                     "percentage is always shown next to the words."),
    ("reach", "The chance of being in a follow-up stage at least once between the as-of date and the horizon, "
              "if nothing new is observed. It is never lower than 'follow-up now'."),
    ("horizon", "How many days ahead the forecast looks (toolbar, 90 days unless changed)."),
    ("next contact due", "The day the chance of a follow-up stage would reach the rule's threshold if nothing new "
                         "is observed, and at the latest 16 weeks after the last contact. 'Overdue by N days' "
                         "means that day has passed (for a case already over the threshold: counted from the day "
                         "it got there after the last contact)."),
    ("flag", "A prompt to look at a case because a follow-up rule fired. The reasons say which rule, the "
             "number against its threshold, and the recent contact that moved it most."),
    ("threshold", "The level a rule compares with, set per workspace (caseview rules). For example 50% for "
                  "'in a follow-up stage now'."),
    ("points", "A change of chance in percentage points: from 40% to 43% is 3 points."),
    ("review status", "What a supervisor has done with a flag: new (nobody has reviewed it), acknowledged, "
                      "actioned or dismissed (dismissing needs a note). Every change is in the audit trail."),
    ("review note", "The text a supervisor wrote with a review; the latest one is shown beside the case."),
    ("overdue flag", "A flag nobody has reviewed whose next contact was due on or before the as-of date."),
    ("priority", "The default order of the caseload: flagged cases first, then by the chances of follow-up."),
    ("most likely path", "The single most likely sequence of stages at the recorded contacts. It is an estimate, "
                         "not a record: nobody observed these stages."),
    ("uncertainty shade", "The grey shade on the case chart: darker where the estimate knows less (long after "
                          "the last contact, or far into the forecast)."),
    ("what-if", "The forecast again with a covariate changed from the as-of date on (for example joining a "
                "balance programme), next to the forecast without the change."),
    ("covariate", "Something recorded about a person that changes how fast stages change (for example living "
                  "alone)."),
    ("time in stage", "How long people typically stay in a stage before moving on (the mean time in stage)."),
    ("interval", "The range the model's estimate is likely to lie in given the data (a 95% interval). Wide "
                 "intervals mean the data say little about that number."),
    ("calibration refits", "Below a few thousand cases the usual 95% intervals were measured to be too narrow. "
                           "The fit then simulates caseloads from the fitted model, fits each again and widens "
                           "every interval as far as those refits needed."),
    ("hazard ratio", "How many times faster (above 1) or slower (below 1) a change of stage happens when a "
                     "covariate is 1 instead of 0."),
    ("observation channel", "One thing recorded at a contact (for example mobility, falls, concern), each with "
                            "a few categories. Observation probabilities say how often each category is "
                            "recorded for people in each stage."),
    ("model version", "The stage model used for the estimates. Fitting it to the caseload or editing it makes a "
                      "new version; older versions stay stored and can be made current again."),
    ("fitting", "Adjusting the model's rates and probabilities so that they agree best with the recorded "
                "contacts (maximum likelihood)."),
    ("audit trail", "A tamper-evident list of every change to the workspace: who, when, what."),
)


def glossary_html(filter_text: str = "") -> str:
    """The glossary as HTML, only the terms whose name or text contains ``filter_text``."""
    needle = filter_text.strip().lower()
    items = [(t, x) for t, x in GLOSSARY if not needle or needle in t.lower() or needle in x.lower()]
    if not items:
        return "<p>No term matches.</p>"
    return "".join(f"<p><b>{html.escape(term)}</b> — {html.escape(text)}</p>" for term, text in items)


class GlossaryDialog(QDialog):
    """The glossary with a filter box (Help > Glossary, F1)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setWindowTitle("caseview — glossary")
        self.resize(720, 640)
        self.filter = QLineEdit(placeholderText="Find a term")
        self.filter.setAccessibleName("Find a term in the glossary")
        self.text = QTextBrowser()
        self.text.setAccessibleName("Glossary")
        self.text.setHtml(glossary_html())
        self.filter.textChanged.connect(lambda t: self.text.setHtml(glossary_html(t)))
        buttons = QDialogButtonBox(QDialogButtonBox.Close)
        buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(self.filter)
        layout.addWidget(self.text, 1)
        layout.addWidget(buttons)
        self.filter.setFocus(Qt.OtherFocusReason)
