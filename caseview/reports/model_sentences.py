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

from .model_summary import SojournRow, baseline_sojourn


def _number(value):
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if math.isfinite(value) else None


def _stage_of(name: str, stages) -> str | None:
    """'mean time in Stable (days)' -> 'Stable' (None when no stage matches)."""
    text = str(name)
    if text.startswith("mean time in "):
        text = text[len("mean time in "):]
    if text.endswith(" (days)"):
        text = text[:-len(" (days)")]
    return text if text in stages else None


def time_in_stage(model, fit_summary=None) -> list:
    """Mean time in each stage (days) with its 95% interval when the fit stored one.

    Parameters
    ----------
    model : hmm.StageModel
    fit_summary : dict or None
        The summary stored with the model version (``ModelVersion.fit_summary``); its
        ``mean_time_in_stage`` rows (``name``, ``estimate``, ``lower``, ``upper``,
        ``informative``) are used where present.

    Returns
    -------
    list[SojournRow], one per stage in model order; ``mean`` None for a stage nobody leaves.
    """
    rows = {r.stage: r for r in baseline_sojourn(model)}
    items = (fit_summary or {}).get("mean_time_in_stage") if isinstance(fit_summary, dict) else None
    for item in items or []:
        if not isinstance(item, dict):
            continue
        stage = _stage_of(item.get("name", ""), model.stages)
        mean = _number(item.get("estimate"))
        if stage is None or mean is None:
            continue
        lower, upper = _number(item.get("lower")), _number(item.get("upper"))
        if item.get("informative") is False or item.get("fixed"):
            lower = upper = None
        rows[stage] = SojournRow(stage, mean, lower, upper)
    return [rows[s] for s in model.stages]


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
