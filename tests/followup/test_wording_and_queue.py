"""Plain words (chances, days, due dates, reasons), the next-contact date for every case, and the
supervisor queue's order, filters and counts."""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest
import scipy.linalg

from caseview.followup import assess_scores, default_rules
from caseview.followup import wording
from caseview.followup.queue import counts_by_coordinator, overdue_mask, queue_rows, queue_status
from caseview.followup.schedule import contact_due_day
from caseview.scoring import score_loaded
from followup_helpers import build_caseload, day
from test_flags import AS_OF, demo_cases


@pytest.fixture
def demo_scores(demo_model):
    return score_loaded(build_caseload(demo_model, demo_cases()), demo_model, day(AS_OF), 90.0)


@pytest.mark.parametrize("n, word, expected", [(0, "day", "0 days"), (1, "day", "1 day"), (2, "day", "2 days"),
                                               (1, "case", "1 case"), (1200, "case", "1,200 cases")])
def test_plural(n, word, expected):
    assert wording.plural(n, word) == expected


def test_days_ago_singular_and_plural():
    assert [wording.days_ago(n) for n in (0, 1, 2, 31)] == ["today", "1 day ago", "2 days ago", "31 days ago"]


@pytest.mark.parametrize("p, words", [(0.0, "very unlikely"), (0.099, "very unlikely"), (0.10, "unlikely"),
                                      (0.349, "unlikely"), (0.35, "about as likely as not"), (0.5,
                                      "about as likely as not"), (0.65, "likely"), (0.899, "likely"),
                                      (0.90, "very likely"), (1.0, "very likely")])
def test_chance_bands_edges(p, words):
    # caseview's own bands (documented in caseview.followup.wording), not a published scale
    assert wording.chance_words(p) == words


def test_percent_never_rounds_a_real_chance_to_0_or_100():
    assert wording.percent(0.003) == "under 1%" and wording.percent(0.998) == "over 99%"
    assert wording.percent(0.0) == "0%" and wording.percent(1.0) == "100%" and wording.percent(0.973) == "97%"


def test_frequency_and_duration_words():
    assert wording.frequency_words(0.1) == "about 1 in 10"
    assert wording.frequency_words(0.62) == "about 6 in 10"
    assert wording.frequency_words(0.001).startswith("almost never")
    assert wording.duration_words(1) == "1 day" and wording.duration_words(21) == "3 weeks"
    assert wording.duration_with_interval(548, 365, 761) == "about 18 months (12 to 25)"
    assert wording.duration_with_interval(3000) == "about 8.2 years"


def test_due_words():
    assert wording.due_words(100, 105) == "overdue by 5 days"
    assert wording.due_words(104, 105) == "overdue by 1 day"
    assert wording.due_words(105, 105) == "due today"
    assert wording.due_words(106, 105) == "1970-04-17 (in 1 day)"


def test_contact_sentence():
    text = wording.contact_sentence(dt.date(2026, 11, 7), "mobility=unable, falls=several", 0.031)
    assert text == "The contact on 2026-11-07 (mobility unable, falls several) raised this by 3 points."
    assert "lowered this by 1 point." in wording.contact_sentence(dt.date(2026, 11, 7), "", -0.012)
    assert "less than 1 point" in wording.contact_sentence(dt.date(2026, 11, 7), "", 0.001)


def test_reason_line_is_sentences_with_the_driving_contact(demo_scores):
    a = assess_scores(demo_scores, default_rules())
    line = a.reason_text[0]
    p = demo_scores.p_follow_up_now[0]
    assert line.startswith(f"{wording.chance_words(p).capitalize()} in a follow-up stage now ({p * 100:.0f}%; "
                           "the threshold is 50%).")
    top = a.reasons[0][0].contacts[0]
    assert f"The contact on {top.date.isoformat()} (" in line
    assert f"raised this by {round(top.change * 100)} point" in line
    assert ">=" not in line and "P(" not in line


def _propagate(model, p, x, days):
    """p expm(Q(x) days), scipy reference."""
    return p @ scipy.linalg.expm(model.generator(x) * days)


def test_due_date_for_everyone_and_overdue_from_the_crossing_day(toy_model):
    # Toy chain (tests/followup/conftest.py): Well -> Worse -> Bad, Bad the follow-up stage, Worse -> Bad
    # at 0.02/day. Known in Worse at the last contact 100 days before the as-of date: P(Bad at t) =
    # 1 - exp(-0.02 t) reaches 0.5 at ceil(ln 2 / 0.02) = 35 days (exponential median), so the contact was
    # due on day 35 after the last contact and is 65 days overdue.
    as_of, last = 20000, np.array([19900, 19990, 19990])
    x = np.zeros((3, 1))
    p_last = np.array([[0.0, 1.0, 0.0], [1.0, 0.0, 0.0], [1.0, 0.0, 0.0]])
    p_now = np.vstack([_propagate(toy_model, p_last[i], x[i], as_of - last[i]) for i in range(3)])
    due = contact_due_day(toy_model, p_now, x, 0.5, as_of, p_last, last, routine_days=None)
    assert due[0] == 19900 + math.ceil(math.log(2) / 0.02)
    assert wording.due_words(due[0], as_of) == "overdue by 65 days"
    # From Well the threshold is reached 122.8 days after the last contact (see test_schedule): day 123
    assert due[1] == 19990 + math.ceil(-math.log(1 - math.sqrt(0.5)) / 0.01)
    # with the routine limit (112 days) the Well cases are due 112 days after their last contact
    capped = contact_due_day(toy_model, p_now, x, 0.5, as_of, p_last, last, routine_days=112)
    assert capped[1] == capped[2] == 19990 + 112 and capped[0] == due[0]
    # a case that never reaches the threshold still gets a date
    never = contact_due_day(toy_model, p_now[1:2], x[:1], 0.999999, as_of, p_last[1:2], last[1:2], 112, 50)
    assert never[0] == 19990 + 112


def test_assessment_dates_every_case(demo_scores):
    a = assess_scores(demo_scores, default_rules())
    assert (a.next_contact_due_day >= 0).all()
    assert (a.next_contact_due_day <= demo_scores.last_contact_day + 112).all()
    over = demo_scores.p_follow_up_now >= 0.5
    assert (a.next_contact_due_day[over] <= demo_scores.as_of_day).all()
    assert (a.next_contact_due_day[over] >= demo_scores.last_contact_day[over]).all()


def _assessment_with_reviews(demo_scores):
    a = assess_scores(demo_scores, default_rules())
    flagged = np.flatnonzero(a.is_flagged)
    assert flagged.size >= 2
    a.review_status[flagged[0]] = "actioned"
    return a, flagged


def test_queue_lists_new_flags_before_reviewed_ones(demo_scores):
    a, flagged = _assessment_with_reviews(demo_scores)
    rows = queue_rows(a)
    assert sorted(rows.tolist()) == sorted(flagged.tolist())
    status = queue_status(a)[rows]
    assert status[-1] == "actioned" and (status[:-1] == "new").all()
    new = rows[:-1]
    assert (np.diff(a.priority[new]) <= 0).all()  # most urgent first within the group


def test_queue_filters_and_counts(demo_scores):
    a, flagged = _assessment_with_reviews(demo_scores)
    assert queue_rows(a, status="actioned").tolist() == [int(flagged[0])]
    coordinator = str(demo_scores.coordinators[flagged[1]])
    mine = queue_rows(a, coordinator=coordinator)
    assert mine.size and (demo_scores.coordinators[mine] == coordinator).all()
    overdue = queue_rows(a, overdue_only=True)
    assert set(overdue.tolist()) == set(np.flatnonzero(overdue_mask(a)).tolist())
    counts = {c.coordinator: c for c in counts_by_coordinator(a)}
    assert sum(c.total for c in counts.values()) == flagged.size
    assert sum(c.overdue for c in counts.values()) == int(overdue_mask(a).sum())
    assert counts[str(demo_scores.coordinators[flagged[0]])].by_status["actioned"] == 1


def test_one_case_queue_rules_agree_with_the_whole_queue(demo_scores):
    """case_in_queue / queue_position (the window's one-row update) against queue_rows, missing priorities too."""
    from caseview.followup.queue import case_in_queue, queue_position

    a, _ = _assessment_with_reviews(demo_scores)
    a.is_flagged[:] = True
    a.priority[::4] = np.nan                 # a missing priority goes last within its review group
    a.priority[1::4] = a.priority[1]         # ties: by case ID
    for coordinator in (None, str(demo_scores.coordinators[0])):
        for status in (None, "new", "actioned"):
            for overdue in (False, True):
                rows = queue_rows(a, coordinator, status, overdue)
                listed = [r for r in range(demo_scores.n_cases) if case_in_queue(a, r, coordinator, status, overdue)]
                assert sorted(listed) == sorted(rows.tolist())
                for i, r in enumerate(rows.tolist()):
                    assert queue_position(a, np.delete(rows, i), r) == i
