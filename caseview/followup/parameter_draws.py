"""Parameter draws for the outlook: models drawn from the fit's estimated sampling distribution.

How they are drawn: the fit stores the covariance of its free parameters on the unconstrained
scale (log rates, log hazard ratios, logits of each probability row against a reference category;
the inverse observed information, see :mod:`hmm.fitting.uncertainty`). Every free parameter -
transition rates, hazard ratios, the channels' probabilities, the initial stage distribution and
the unscheduled-contact rates when the model has them - is drawn from the multivariate normal
with the fitted values as mean and that covariance, and mapped back (rates = exp, probability
rows = softmax against the same reference category the fit used). A parameter left exactly at
its fitted value in a draw keeps the fitted number itself (no ``exp(log(rate))`` rounding), so a
draw with no deviation is the fitted model.

The outlook moves both the forecast and each case's stage probabilities now with the drawn
model (:mod:`caseview.followup.now_draws`).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from caseview.errors import InputError


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
    """The parameters with a usable variance: ``(names, block, kept_fixed)``."""
    usable = [i for i in range(len(names)) if np.isfinite(covariance[i, i]) and covariance[i, i] >= 0]
    if usable and not np.all(np.isfinite(covariance[np.ix_(usable, usable)])):
        usable = []
    if names and not usable:
        raise InputError("parameter uncertainty: the fit could not estimate the uncertainty of its parameters "
                         "(no finite covariance, for example an estimate on the boundary); leave parameter uncertainty out")
    return [names[i] for i in usable], covariance[np.ix_(usable, usable)], [names[i] for i in range(len(names))
                                                                              if i not in usable]


class _Layout:
    """Where each stored parameter name lives in the model, and its fitted unconstrained value.

    ``slots[name]`` is one of ``("rate", i)``, ``("effect", i, covariate)``, ``("row", key, k)``
    (category or stage ``k`` of a probability row; ``key`` = ``(channel, stage)`` or ``"initial"``),
    ``("contact_rate", stages)`` or ``("contact_effect", covariate)``.
    """

    def __init__(self, model, names: list):
        stages = model.stages
        where = {}
        for i, t in enumerate(model.transitions):
            label = f"{stages[t.source]} -> {stages[t.target]}"
            where[f"rate {label}"] = ("rate", i)
            for cov in t.effects:
                where[f"effect of {cov} on {label}"] = ("effect", i, cov)
        for c, channel in enumerate(model.channels):
            for r, stage in enumerate(stages):
                for k, category in enumerate(channel.categories):
                    where[f"{channel.name}: P({category} | {stage})"] = ("row", (c, r), k)
        for k, stage in enumerate(stages):
            where[f"initial P({stage})"] = ("row", "initial", k)
        block = model.unscheduled_contacts
        if block is not None:
            positive = tuple(int(r) for r in np.flatnonzero(np.asarray(block.rates) > 0))
            where["unscheduled contact rate, same in every stage"] = ("contact_rate", positive)
            for r in positive:
                where[f"unscheduled contact rate in {stages[r]}"] = ("contact_rate", (r,))
            for cov in model.covariates:
                where[f"effect of {cov} on the unscheduled contact rate"] = ("contact_effect", cov)
        missing = [n for n in names if n not in where]
        if missing:
            raise InputError(f"parameter uncertainty: the stored covariance names {missing[0]!r}, which the "
                             "current model does not have; fit the model again")
        self.model = model
        self.slots = {n: where[n] for n in names}
        named = {}
        for n in names:
            if where[n][0] == "row":
                named.setdefault(where[n][1], set()).add(where[n][2])
        self.references = {}
        for key, free in named.items():   # the fit's reference: the one possible category it did not name
            support = set(np.flatnonzero(self._row(key) > 0).tolist())
            rest = sorted(support - free)
            if len(rest) != 1 or not free <= support:
                raise InputError("parameter uncertainty: the stored covariance does not match the current model's "
                                 "probability rows; fit the model again")
            self.references[key] = rest[0]

    def _row(self, key) -> np.ndarray:
        if key == "initial":
            return np.asarray(self.model.initial, dtype=float)
        c, r = key
        return np.asarray(self.model.channels[c].probabilities[r], dtype=float)

    def centre(self, names: list) -> np.ndarray:
        """Fitted values of ``names`` on the unconstrained scale, shape (len(names),)."""
        m = self.model
        out = []
        for n in names:
            slot = self.slots[n]
            if slot[0] == "rate":
                out.append(np.log(m.transitions[slot[1]].rate))
            elif slot[0] == "effect":
                out.append(m.transitions[slot[1]].effects[slot[2]])
            elif slot[0] == "row":
                row = self._row(slot[1])
                out.append(np.log(row[slot[2]] / row[self.references[slot[1]]]))
            elif slot[0] == "contact_rate":
                out.append(np.log(m.unscheduled_contacts.rates[slot[1][0]]))
            else:
                out.append(m.unscheduled_contacts.effects.get(slot[1], 0.0))
        return np.array(out, dtype=float)

    def model_at(self, names: list, values: np.ndarray, moved: np.ndarray):
        """The model with ``names`` set to ``values`` (unconstrained) where ``moved``; the others keep
        their fitted numbers exactly."""
        m = self.model
        transitions = list(m.transitions)
        rows = {}
        block = m.unscheduled_contacts
        contact_rates = None if block is None else np.array(block.rates, dtype=float)
        contact_effects = None if block is None else dict(block.effects)
        logits = {}
        for n, value, go in zip(names, values, moved):
            slot = self.slots[n]
            if slot[0] == "row":
                logits.setdefault(slot[1], {})[slot[2]] = float(value)
                if go:
                    rows[slot[1]] = True
                continue
            if not go:
                continue
            if slot[0] == "rate":
                transitions[slot[1]] = replace(transitions[slot[1]], rate=float(np.exp(value)))
            elif slot[0] == "effect":
                t = transitions[slot[1]]
                transitions[slot[1]] = replace(t, effects={**t.effects, slot[2]: float(value)})
            elif slot[0] == "contact_rate":
                contact_rates[list(slot[1])] = float(np.exp(value))
            else:
                contact_effects[slot[1]] = float(value)
        channels = [replace(c, probabilities=np.array(c.probabilities, dtype=float)) for c in m.channels]
        initial = np.asarray(m.initial, dtype=float)
        for key in rows:
            fitted = self._row(key)
            z = np.full(fitted.size, -np.inf)
            support = fitted > 0
            z[support] = np.log(fitted[support] / fitted[self.references[key]])  # fixed categories keep theirs
            z[self.references[key]] = 0.0
            for k, value in logits[key].items():
                z[k] = value
            weights = np.exp(z - z[support].max())
            weights[~support] = 0.0
            if key == "initial":
                initial = weights / weights.sum()
            else:
                channels[key[0]].probabilities[key[1]] = weights / weights.sum()
        extra = {}
        if block is not None:
            extra["unscheduled_contacts"] = replace(block, rates=contact_rates, effects=contact_effects)
        return replace(m, transitions=tuple(transitions), channels=tuple(channels), initial=initial, **extra)


@dataclass(frozen=True)
class ParameterDraws:
    """Drawn models and what was drawn.

    Attributes
    ----------
    models : list of StageModel
    drawn : list of str
        Names of the parameters drawn.
    kept_fixed : list of str
        Parameters without a usable variance (a flat direction of the likelihood), kept at their
        fitted values in every draw.
    at_fit : ndarray of bool, shape (n_draws,)
        Draws that moved no parameter: those models are the fitted model, number for number.
    """

    models: list
    drawn: list
    kept_fixed: list
    at_fit: np.ndarray = None


def draw_models(model, version, n_draws: int, rng: np.random.Generator) -> ParameterDraws:
    """``n_draws`` copies of ``model`` with every free parameter drawn (see the module docstring).

    Raises
    ------
    InputError
        The model version has no usable fit covariance.
    """
    all_names, covariance = fit_covariance(version)
    layout = _Layout(model, all_names)
    names, block, kept_fixed = _drawn_block(all_names, covariance)
    centre = layout.centre(names)
    values, vectors = np.linalg.eigh(0.5 * (block + block.T))
    root = vectors * np.sqrt(np.clip(values, 0.0, None))          # covariance = root @ root.T
    deviations = rng.standard_normal((n_draws, len(names))) @ root.T
    moved = deviations != 0.0
    models = [layout.model_at(names, centre + d, go) for d, go in zip(deviations, moved)]
    return ParameterDraws(models, names, kept_fixed, ~moved.any(axis=1))
