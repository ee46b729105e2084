"""What the stage model says, in sentences a case worker can hold against experience.

"People typically stay Stable for about 18 months (12 to 25), then most often move to Slipping."
"Concern recorded as 'serious': about 1 in 50 contacts when Stable, about 6 in 10 when Crisis."

The numbers come from the model (and, for intervals, from the fit summary stored with the model
version) through :func:`time_in_stage`, the one place that reads mean times in stage; nothing is
estimated here.
"""

from __future__ import annotations

import math

import numpy as np

from caseview.followup.wording import duration_with_interval, frequency_words

from .model_summary import as_fit_summary, baseline_time_in_stage, fitted_time_in_stage


def time_in_stage(model, fit_summary=None) -> list:
    """Mean time in each stage (days) with its 95% interval when the fit found an informative one.

    Parameters
    ----------
    model : hmm.StageModel
    fit_summary : hmm.fitting.FitSummary, its stored JSON (``ModelVersion.fit_summary``) or None
        Read with :func:`caseview.reports.model_summary.as_fit_summary`; the same rows as the
        report's model page (:func:`~caseview.reports.model_summary.fitted_time_in_stage`).

    Returns
    -------
    list[TimeInStageRow], one per stage in model order; ``mean`` None for a stage nobody leaves.
    """
    fit = as_fit_summary(fit_summary)
    fitted = fitted_time_in_stage(model, fit) if fit is not None else None
    return fitted if fitted else baseline_time_in_stage(model)


def _next_stages(model, stage_index: int) -> list:
    """(stage, share of moves out) at all covariates 0, largest first."""
    q = model.generator()
    out = np.clip(np.asarray(q[stage_index], dtype=float), 0.0, None)
    out[stage_index] = 0.0
    total = out.sum()
    if total <= 0:
        return []
    order = np.argsort(-out, kind="stable")
    return [(model.stages[t], float(out[t] / total)) for t in order if out[t] > 0]


def stay_sentences(model, fit_summary=None) -> list:
    """One sentence per stage: how long people typically stay, and where they go next."""
    sentences = []
    for k, row in enumerate(time_in_stage(model, fit_summary)):
        if row.mean is None:
            sentences.append(f"{row.stage} is a final stage in the model: people do not leave it.")
            continue
        text = f"People typically stay {row.stage} for {duration_with_interval(row.mean, row.lower, row.upper)}"
        following = _next_stages(model, k)
        if following:
            target, share = following[0]
            text += (f", then most often move to {target}" if share < 0.995 else f", then move to {target}")
            if len(following) > 1:
                text += f" ({frequency_words(share)} moves)"
        sentences.append(text + ".")
    return sentences


def observation_sentences(model) -> list:
    """For each observation channel, how often its last category is recorded in each stage."""
    sentences = []
    for channel in model.channels:
        category = channel.categories[-1]
        parts = [f"{frequency_words(p)} contacts when {stage}" if i == 0 else f"{frequency_words(p)} when {stage}"
                 for i, (stage, p) in enumerate(zip(model.stages, channel.probabilities[:, -1]))]
        name = channel.name.replace("_", " ")
        sentences.append(f"{name[:1].upper() + name[1:]} recorded as ‘{category}’: " + ", ".join(parts) + ".")
    return sentences


def effect_sentences(model) -> list:
    """How each covariate changes the speed of a move (hazard ratio in words)."""
    sentences = []
    for t in model.transitions:
        for name, beta in t.effects.items():
            ratio = math.exp(float(beta))
            if ratio >= 1.05:
                how = f"about {ratio:.1f} times as often"
            elif ratio <= 0.95:
                how = f"about {(1 - ratio) * 100:.0f}% less often"
            else:
                how = "about as often"
            sentences.append(f"With {name.replace('_', ' ')}, moves from {model.stages[t.source]} to "
                             f"{model.stages[t.target]} happen {how}.")
    return sentences


def model_sentences(model, fit_summary=None) -> dict:
    """All the sentences, by section: ``stays``, ``observations``, ``effects``."""
    return {"stays": stay_sentences(model, fit_summary), "observations": observation_sentences(model),
            "effects": effect_sentences(model)}
