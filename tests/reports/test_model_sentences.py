"""What the model says in sentences: numbers read from the model and its stored fit summary."""

from __future__ import annotations

import pytest

from caseview.followup.wording import duration_words, frequency_words
from caseview.reports.model_sentences import model_sentences, time_in_stage


def test_stays_come_from_the_rates_when_not_fitted(demo_model):
    rows = time_in_stage(demo_model, None)
    q = demo_model.generator()
    stable = demo_model.stage_index("Stable")
    # mean holding time of a continuous-time Markov chain = 1 / total rate out (exponential sojourn;
    # Norris, Markov Chains, 1997, section 2.6)
    assert rows[stable].mean == pytest.approx(-1 / q[stable, stable])
    assert rows[stable].lower is None
    stays = model_sentences(demo_model)["stays"]
    assert stays[stable].startswith(f"People typically stay Stable for about {duration_words(rows[stable].mean)}")
    final = demo_model.stage_index("Moved to residential care")
    assert stays[final] == "Moved to residential care is a final stage in the model: people do not leave it."


def test_fitted_interval_is_shown_in_the_estimates_unit(demo_model):
    from hmm.fitting import FitSummary
    from hmm.fitting.uncertainty import ParameterEstimate

    def mean_time(stage, estimate, lower, upper):
        return ParameterEstimate(f"mean time in {stage} (days)", "mean_time_in_stage", estimate, None, lower, upper,
                                 False, "wald", stage=stage)

    # the stored JSON form (FitSummary.to_dict), read back as every reader does
    stored = FitSummary(-100.0, -100.0, False, 5, 50, 400, 210.0, 220.0, 20, 40, True,
                        mean_time_in_stage=(mean_time("Stable", 548.0, 365.0, 761.0),
                                            mean_time("Slipping", 120.0, 1.0, 90000.0))).to_dict()
    assert [row["informative"] for row in stored["mean_time_in_stage"]] == [True, False]
    stays = model_sentences(demo_model, stored)["stays"]
    assert stays[0].startswith("People typically stay Stable for about 18 months (12 to 25), then move to Slipping")
    assert stays[1].startswith("People typically stay Slipping for about 4 months,")  # no useless interval


def test_observation_sentence_gives_one_in_n(demo_model):
    sentences = model_sentences(demo_model)["observations"]
    concern = next(c for c in demo_model.channels if c.name == "concern")
    p = concern.probabilities[demo_model.stage_index("Stable"), -1]
    text = next(s for s in sentences if s.startswith("Concern"))
    assert f"recorded as ‘{concern.categories[-1]}’: {frequency_words(p)} contacts when Stable" in text


def test_effects_in_words(demo_model):
    effects = model_sentences(demo_model)["effects"]
    assert any(s.startswith("With lives alone, moves from Stable to Slipping happen about") for s in effects)
    assert all("times as often" in s or "less often" in s or "about as often" in s for s in effects)
