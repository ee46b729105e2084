"""Plain words for the numbers: chances, counts, days, the next contact due, and why a case is flagged.

Used by the window, the command line and the reports alike, so a case worker reads the same
sentence everywhere; the numbers stay beside the words (and in their own CSV columns).

Chance words (:data:`CHANCE_BANDS`) are caseview's own five bands, not borrowed from any
published scale. They are symmetric around 50% (the default threshold of ``in_follow_up_now``,
where "in a follow-up stage" becomes the better single guess) and their edges are round numbers a
reader can remember:

=============  ==================================
chance         words
=============  ==================================
under 10%      very unlikely
10% to 34%     unlikely
35% to 64%     about as likely as not
65% to 89%     likely
90% and over   very likely
=============  ==================================

The words describe the model's estimate, not the person: every sentence is advisory (see
``caseview.ADVISORY_NOTICE``).
"""

from __future__ import annotations

import datetime as dt

from caseview.dates import day_text

#: (lowest chance of the band, words), highest band first. Caseview's own bands (see above).
CHANCE_BANDS = ((0.90, "very likely"), (0.65, "likely"), (0.35, "about as likely as not"),
                (0.10, "unlikely"), (0.0, "very unlikely"))



def plural(n: int, singular: str, plural_form: str | None = None) -> str:
    """``plural(1, "day")`` -> ``"1 day"``; ``plural(3, "day")`` -> ``"3 days"`` (thousands separated)."""
    n = int(n)
    word = singular if n == 1 else (plural_form or singular + "s")
    return f"{n:,} {word}"


def days_ago(n: int) -> str:
    """``0`` -> ``"today"``, ``1`` -> ``"1 day ago"``, ``12`` -> ``"12 days ago"``."""
    n = int(n)
    if n == 0:
        return "today"
    if n < 0:
        return "in " + plural(-n, "day")
    return plural(n, "day") + " ago"


def percent(p: float) -> str:
    """``0.973`` -> ``"97%"``; values between 0 and 1% or 99% and 100% are not rounded to 0 or 100."""
    p = float(p)
    if 0.0 < p < 0.005:
        return "under 1%"
    if 0.995 < p < 1.0:
        return "over 99%"
    return f"{p * 100:.0f}%"


def chance_words(p: float) -> str:
    """The band's words for a chance between 0 and 1 (``0.97`` -> ``"very likely"``)."""
    p = float(p)
    for lowest, words in CHANCE_BANDS:
        if p >= lowest:
            return words
    return CHANCE_BANDS[-1][1]


def points(change: float) -> str:
    """A change of chance in percentage points: ``0.031`` -> ``"3 points"``, ``0.004`` -> ``"less than 1 point"``."""
    size = abs(float(change)) * 100
    if size < 0.5:
        return "less than 1 point"
    return plural(round(size), "point")


def frequency_words(p: float) -> str:
    """How often, as "about 1 in N" (``0.1`` -> ``"about 1 in 10"``, ``0.62`` -> ``"about 6 in 10"``)."""
    p = float(p)
    if p < 0.005:
        return "almost never (under 1 in 200)"
    if p > 0.995:
        return "almost always"
    if p < 0.45:
        return f"about 1 in {round(1 / p):,}"
    return f"about {round(p * 10)} in 10"


def duration_words(days: float) -> str:
    """A length of time in the unit a person would use: days, weeks, months or years (rounded)."""
    days = float(days)
    if days < 14:
        return plural(max(1, round(days)), "day")
    if days < 61:
        return plural(round(days / 7), "week")
    if days < 730:
        return plural(round(days / 30.44), "month")
    years = days / 365.25
    return f"{years:.1f} years" if years < 10 else plural(round(years), "year")


def _same_unit(days: float, reference: float) -> str:
    """``days`` in the unit :func:`duration_words` chooses for ``reference`` (number only)."""
    if reference < 14:
        return f"{max(0, round(days)):,}"
    if reference < 61:
        return f"{round(days / 7):,}"
    if reference < 730:
        return f"{round(days / 30.44):,}"
    years = days / 365.25
    return f"{years:.1f}" if reference / 365.25 < 10 else f"{round(years):,}"


def duration_with_interval(days: float, lower: float | None = None, upper: float | None = None) -> str:
    """``"about 18 months (12 to 25)"``: the interval in the estimate's unit, left out when unknown."""
    text = "about " + duration_words(days)
    if lower is not None and upper is not None:
        text += f" ({_same_unit(lower, days)} to {_same_unit(upper, days)})"
    return text


def short_date(day: int) -> str:
    """Day number (since 1970-01-01) as ISO ``YYYY-MM-DD`` (reports rewrite ISO dates when de-identifying)."""
    return day_text(day)


def due_words(due_day: int, as_of_day: int) -> str:
    """Next contact due, relative to the as-of date: ``"overdue by 5 days"``, ``"due today"``,
    ``"2026-12-14 (in 14 days)"``; ``"no date"`` for a negative day (no schedule)."""
    due_day, as_of_day = int(due_day), int(as_of_day)
    if due_day < 0:
        return "no date"
    if due_day < as_of_day:
        return "overdue by " + plural(as_of_day - due_day, "day")
    if due_day == as_of_day:
        return "due today"
    return f"{short_date(due_day)} (in {plural(due_day - as_of_day, 'day')})"


def evidence_words(evidence: str) -> str:
    """``"mobility=unable, concern=serious"`` -> ``"mobility unable, concern serious"``."""
    return evidence.replace("_", " ").replace("=", " ")


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


# ------------------------------------------------------------------ why a case is flagged
def in_follow_up_sentence(value: float, threshold: float) -> str:
    return (f"{_capital(chance_words(value))} in a follow-up stage now ({percent(value)}; "
            f"the threshold is {percent(threshold)}).")


def reach_sentence(value: float, threshold: float, horizon_days: float) -> str:
    return (f"{_capital(chance_words(value))} to be in a follow-up stage at some time in the next "
            f"{plural(round(horizon_days), 'day')} ({percent(value)}; the threshold is {percent(threshold)}).")


def long_gap_sentence(days: float, limit_days: float, stage: str, certainty: float, certainty_below: float) -> str:
    return (f"Not seen for {plural(round(days), 'day')} (the limit is {round(limit_days):,}), and the most "
            f"likely stage, {stage}, has only a {percent(certainty)} chance (under {percent(certainty_below)}): "
            "the estimate cannot say where this person is.")


def sharp_rise_sentence(before: float, after: float, threshold: float, previous_as_of: dt.date | None) -> str:
    since = f" since the run as of {previous_as_of.isoformat()}" if previous_as_of else " since the previous run"
    return (f"The chance of a follow-up stage now rose by {points(after - before)}{since} (from {percent(before)} "
            f"to {percent(after)}; the rule fires at a rise of {points(threshold)}).")


def contact_sentence(date: dt.date, evidence: str, change: float) -> str:
    """``"The contact on 2026-11-07 (mobility unable, falls several) raised this by 3 points."``"""
    recorded = f" ({evidence_words(evidence)})" if evidence else " (nothing recorded)"
    if abs(change) * 100 < 0.5:
        effect = "changed this by less than 1 point"
    else:
        effect = f"{'raised' if change > 0 else 'lowered'} this by {points(change)}"
    return f"The contact on {date.isoformat()}{recorded} {effect}."


def key_contact(contacts):
    """The contact to name in a one-line reason: the largest rise, else the largest change (or None)."""
    contacts = list(contacts or [])
    if not contacts:
        return None
    rising = [c for c in contacts if c.change > 0]
    pool = rising or contacts
    return max(pool, key=lambda c: abs(c.change))
