"""Parameter draws for the outlook: models drawn from the fit's estimated sampling distribution.

How they are drawn: the fit stores the covariance of its free parameters on the unconstrained
scale (log rates, log hazard ratios, logits; the inverse observed information, see
:mod:`hmm.fitting.uncertainty`). The parameters the outlook uses - transition rates, hazard
ratios and the initial stage distribution - are drawn from the multivariate normal with the
fitted values as mean and the matching block of that covariance (the marginal of the joint
normal), mapped back (rates = exp, initial shares = softmax against the same reference stage).
Each case's stage probabilities on the as-of date stay those of the fitted model (re-running
every case's evidence for every draw would take minutes at 100,000 cases), so the bands show
the uncertainty in where cases go from now on, not in where they are now.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from caseview.errors import InputError

DRAWN_KINDS = ("rate ", "effect of ", "initial P(")


def fit_covariance(version) -> tuple:
    """``(names, covariance)`` stored with a fitted model version, or raise InputError saying why not."""
    from hmm.fitting import FitSummary

    label = "the current model" if version is None else f"model version {version.id}"   # None: not stored
    if version is None or not version.fit_summary:
        raise InputError(f"parameter uncertainty: {label} was entered, not fitted, so there is no estimated "
                         "sampling distribution to draw from; fit the model first or leave parameter uncertainty out")
    try:
        summary = FitSummary.from_dict(version.fit_summary)
    except ValueError as exc:
        raise InputError(f"parameter uncertainty: {label}: {exc}") from None
    names, matrix = summary.free_parameters, summary.covariance
    if not names or matrix is None:
        raise InputError(f"parameter uncertainty: {label} was fitted before caseview stored the parameters' "
                         "covariance; fit it again or leave parameter uncertainty out")
    covariance = np.array([[np.nan if v is None else v for v in row] for row in matrix], dtype=float)
    if covariance.shape != (len(names), len(names)):
        raise InputError(f"parameter uncertainty: {label}: the stored covariance is {covariance.shape}, "
                         f"expected {len(names)} x {len(names)}")
    return list(names), covariance


def _drawn_block(names: list, covariance: np.ndarray) -> tuple:
    """The rates, hazard ratios and initial shares with a usable variance: ``(names, block, kept_fixed)``."""
    wanted = [i for i, name in enumerate(names) if name.startswith(DRAWN_KINDS)]
    usable = [i for i in wanted if np.isfinite(covariance[i, i]) and covariance[i, i] >= 0]
    if usable and not np.all(np.isfinite(covariance[np.ix_(usable, usable)])):
        usable = []
    if wanted and not usable:
        raise InputError("parameter uncertainty: the fit could not estimate the uncertainty of the rates, "
                         "hazard ratios or initial shares (no finite covariance, for example an estimate on the "
                         "boundary); leave parameter uncertainty out")
    return [names[i] for i in usable], covariance[np.ix_(usable, usable)], [names[i] for i in wanted if i not in usable]


def _centre(model, names: list, reference) -> np.ndarray:
    """Fitted values of the drawn parameters on the unconstrained scale, in ``names`` order."""
    stages = model.stages
    by_name = {}
    for t in model.transitions:
        label = f"{stages[t.source]} -> {stages[t.target]}"
        by_name[f"rate {label}"] = np.log(t.rate) if t.rate > 0 else -np.inf
        for cov, value in t.effects.items():
            by_name[f"effect of {cov} on {label}"] = value
    initial = np.asarray(model.initial, dtype=float)
    for s, stage in enumerate(stages):
        if initial[s] > 0 and reference is not None:
            by_name[f"initial P({stage})"] = np.log(initial[s] / initial[reference])
    missing = [n for n in names if n not in by_name]
    if missing:
        raise InputError(f"parameter uncertainty: the stored covariance names {missing[0]!r}, which the "
                         "current model does not have; fit the model again")
    return np.array([by_name[n] for n in names])


def _initial_reference(model, names: list):
    free = {n[len("initial P("):-1] for n in names if n.startswith("initial P(")}
    if not free:
        return None
    support = [s for s, p in enumerate(model.initial) if p > 0 and model.stages[s] not in free]
    return support[0] if support else None


@dataclass(frozen=True)
class ParameterDraws:
    """Drawn models and what was drawn.

    Attributes
    ----------
    models : list of StageModel
    drawn : list of str
        Names of the parameters drawn.
    kept_fixed : list of str
        Rates, hazard ratios or initial shares without a usable variance (a flat direction of the
        likelihood), kept at their fitted values in every draw.
    """

    models: list
    drawn: list
    kept_fixed: list


def draw_models(model, version, n_draws: int, rng: np.random.Generator) -> ParameterDraws:
    """``n_draws`` copies of ``model`` with rates, hazard ratios and initial shares drawn (see module docstring).

    Raises
    ------
    InputError
        The model version has no usable fit covariance.
    """
    all_names, covariance = fit_covariance(version)
    reference = _initial_reference(model, all_names)       # the fit's reference stage for the initial logits
    names, block, kept_fixed = _drawn_block(all_names, covariance)
    centre = _centre(model, names, reference)
    fixed = dict(zip(kept_fixed, _centre(model, kept_fixed, reference)))
    values, vectors = np.linalg.eigh(0.5 * (block + block.T))
    root = vectors * np.sqrt(np.clip(values, 0.0, None))          # covariance = root @ root.T
    draws = centre + rng.standard_normal((n_draws, len(names))) @ root.T
    stages = model.stages
    models = []
    for theta in draws:
        value = {**fixed, **dict(zip(names, theta))}
        transitions = []
        for t in model.transitions:
            label = f"{stages[t.source]} -> {stages[t.target]}"
            rate = float(np.exp(value[f"rate {label}"])) if f"rate {label}" in value else t.rate
            effects = {cov: float(value.get(f"effect of {cov} on {label}", v)) for cov, v in t.effects.items()}
            transitions.append(replace(t, rate=rate, effects=effects))
        initial = np.asarray(model.initial, dtype=float)
        if reference is not None:
            logits = np.full(initial.size, -np.inf)
            logits[reference] = 0.0
            for s, stage in enumerate(stages):
                if f"initial P({stage})" in value:
                    logits[s] = value[f"initial P({stage})"]
            weights = np.exp(logits - logits.max())
            initial = weights / weights.sum()
        models.append(replace(model, transitions=tuple(transitions), initial=initial))
    return ParameterDraws(models, names, kept_fixed)
