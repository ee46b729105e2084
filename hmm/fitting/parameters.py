"""The free parameters of a stage model as one unconstrained vector, and back.

Layout of the vector (only parameters that are free are in it):

1. ``log`` of each free baseline transition rate (per day);
2. each free covariate effect (log hazard ratio), unbounded;
3. for each channel and each free stage row, the logits ``log(p_k / p_ref)`` of the row's
   categories other than a reference category (the category with the largest probability in
   the start model);
4. the logits of the initial distribution, same construction (unless ``initial_fixed``);
5. with an ``unscheduled_contacts`` block: ``log`` of each free unscheduled contact rate (one shared
   value when ``same_in_every_stage``), then each free log rate ratio of a covariate.

Fixed values (``Transition.fixed_rate``, ``Transition.fixed_effects``, ``Channel.fixed_stages``,
``StageModel.initial_fixed``) are not in the vector and keep their values exactly.

*Structural zeros*: a rate of exactly 0, or a probability of exactly 0 in the start model, is
taken as "not possible" and stays 0 (it cannot be represented on the log/logit scale). A row
with a single possible category has nothing to estimate.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..model import StageModel

__all__ = ["ParameterSpec", "parameter_spec", "ModelArrays", "LOG_RATE_BOUNDS", "LOGIT_BOUNDS"]

#: Bounds used by the optimiser on log rates (rates 1e-12 .. 10 per day).
LOG_RATE_BOUNDS = (np.log(1e-12), np.log(10.0))
#: Bounds on category logits (probabilities down to about 1e-11 of the reference category).
LOGIT_BOUNDS = (-25.0, 25.0)
#: Bounds on log hazard ratios.
EFFECT_BOUNDS = (-20.0, 20.0)


@dataclass(frozen=True)
class SoftmaxRow:
    """One probability row parametrised by logits against a reference category.

    ``slots[i]`` is the vector position of the logit of category ``free[i]``.
    """

    support: np.ndarray    # int, categories with non-zero probability
    reference: int
    free: np.ndarray       # int, support minus the reference
    slots: np.ndarray      # int, positions in the vector


@dataclass(frozen=True)
class ModelArrays:
    """Natural-scale arrays of a model, in the form the likelihood uses.

    Attributes
    ----------
    rates : ndarray, shape (n_transitions,)
    effects : ndarray, shape (n_transitions, n_covariates)
    emissions : tuple of ndarray, each shape (n_stages, n_categories)
    initial : ndarray, shape (n_stages,)
    unscheduled_rates : ndarray, shape (n_stages,) or None
        Unscheduled contact rates per day (None without the block).
    unscheduled_effects : ndarray, shape (n_covariates,) or None
        Their log rate ratios (0 for covariates without an effect).
    """

    rates: np.ndarray
    effects: np.ndarray
    emissions: tuple
    initial: np.ndarray
    unscheduled_rates: np.ndarray | None = None
    unscheduled_effects: np.ndarray | None = None


@dataclass(frozen=True)
class ParameterSpec:
    """Map between a :class:`StageModel` and its vector of free unconstrained parameters.

    Attributes
    ----------
    template : StageModel
        The model whose structure and fixed values are used.
    names, kinds : tuple of str, length n_free
        Readable name and kind (``'rate'``, ``'log_hazard_ratio'``, ``'observation'``,
        ``'initial'``) of each vector entry.
    rate_slots : ndarray of int, shape (n_transitions,)
        Vector position of each transition's log rate, -1 when fixed.
    effect_slots : ndarray of int, shape (n_transitions, n_covariates)
        Position of each effect, -1 when fixed or absent.
    emission_rows : tuple of tuple of SoftmaxRow or None
        ``emission_rows[c][r]`` for channel ``c`` and stage ``r`` (None when fixed).
    initial_row : SoftmaxRow or None
    lower, upper : ndarray, shape (n_free,)
        Bounds for the optimiser.
    unscheduled_rate_slots : ndarray of int, shape (n_stages,)
        Vector position of each stage's log unscheduled contact rate, -1 when fixed, zero or
        without the block (stages share one position when the rates are the same in every stage).
    unscheduled_effect_slots : ndarray of int, shape (n_covariates,)
        Position of each log rate ratio, -1 when fixed or absent.
    """

    template: StageModel
    names: tuple
    kinds: tuple
    rate_slots: np.ndarray
    effect_slots: np.ndarray
    emission_rows: tuple
    initial_row: object
    lower: np.ndarray
    upper: np.ndarray
    unscheduled_rate_slots: np.ndarray | None = None
    unscheduled_effect_slots: np.ndarray | None = None

    @property
    def n_free(self) -> int:
        return len(self.names)

    # ----------------------------------------------------------- conversions
    def to_vector(self, model: StageModel | None = None) -> np.ndarray:
        """Free parameters of ``model`` (default the template), shape (n_free,)."""
        model = self.template if model is None else model
        theta = np.zeros(self.n_free)
        for i, t in enumerate(model.transitions):
            if self.rate_slots[i] >= 0:
                theta[self.rate_slots[i]] = np.log(t.rate)
            for k, cov in enumerate(model.covariates):
                if self.effect_slots[i, k] >= 0:
                    theta[self.effect_slots[i, k]] = t.effects.get(cov, 0.0)
        for c, channel in enumerate(model.channels):
            for r, row in enumerate(self.emission_rows[c]):
                if row is not None:
                    theta[row.slots] = _logits(np.asarray(channel.probabilities[r], float), row)
        if self.initial_row is not None:
            theta[self.initial_row.slots] = _logits(np.asarray(model.initial, float), self.initial_row)
        block = model.unscheduled_contacts
        if block is not None and self.unscheduled_rate_slots is not None:
            for r in np.flatnonzero(self.unscheduled_rate_slots >= 0)[::-1]:  # the first stage of a shared slot wins
                theta[self.unscheduled_rate_slots[r]] = np.log(block.rates[r])
            for k, cov in enumerate(model.covariates):
                if self.unscheduled_effect_slots[k] >= 0:
                    theta[self.unscheduled_effect_slots[k]] = block.effects.get(cov, 0.0)
        return np.clip(theta, self.lower, self.upper)

    def arrays(self, theta: np.ndarray) -> ModelArrays:
        """Natural-scale arrays for the vector ``theta`` (fixed values from the template)."""
        m = self.template
        rates = np.array([t.rate for t in m.transitions], dtype=float)
        free = self.rate_slots >= 0
        rates[free] = np.exp(theta[self.rate_slots[free]])
        effects = np.zeros((len(m.transitions), m.n_covariates))
        for i, t in enumerate(m.transitions):
            for k, cov in enumerate(m.covariates):
                effects[i, k] = t.effects.get(cov, 0.0)
        eff_free = self.effect_slots >= 0
        effects[eff_free] = theta[self.effect_slots[eff_free]]
        emissions = []
        for c, channel in enumerate(m.channels):
            table = np.array(channel.probabilities, dtype=float)
            for r, row in enumerate(self.emission_rows[c]):
                if row is not None:
                    table[r] = _softmax(theta, row, table.shape[1])
            emissions.append(table)
        initial = np.array(m.initial, dtype=float)
        if self.initial_row is not None:
            initial = _softmax(theta, self.initial_row, initial.size)
        block = m.unscheduled_contacts
        if block is None:
            return ModelArrays(rates, effects, tuple(emissions), initial)
        contact_rates = np.array(block.rates, dtype=float)
        free = self.unscheduled_rate_slots >= 0
        contact_rates[free] = np.exp(theta[self.unscheduled_rate_slots[free]])
        contact_effects = np.array([block.effects.get(cov, 0.0) for cov in m.covariates], dtype=float)
        free = self.unscheduled_effect_slots >= 0
        contact_effects[free] = theta[self.unscheduled_effect_slots[free]]
        return ModelArrays(rates, effects, tuple(emissions), initial, contact_rates, contact_effects)

    def to_model(self, theta: np.ndarray) -> StageModel:
        """A :class:`StageModel` with the template's structure and the values in ``theta``."""
        a = self.arrays(theta)
        m = self.template
        transitions = []
        for i, t in enumerate(m.transitions):
            effects = {cov: float(a.effects[i, m.covariates.index(cov)]) for cov in t.effects}
            for k, cov in enumerate(m.covariates):
                if self.effect_slots[i, k] >= 0:
                    effects[cov] = float(a.effects[i, k])
            transitions.append(replace(t, rate=float(a.rates[i]), effects=effects))
        channels = tuple(replace(c, probabilities=a.emissions[j]) for j, c in enumerate(m.channels))
        block = m.unscheduled_contacts
        if block is not None:
            effects = {cov: float(a.unscheduled_effects[m.covariates.index(cov)]) for cov in block.effects}
            block = replace(block, rates=a.unscheduled_rates.copy(), effects=effects)
        return replace(m, transitions=tuple(transitions), channels=channels, initial=a.initial,
                       unscheduled_contacts=block)


def _logits(p: np.ndarray, row: SoftmaxRow) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(p[row.free]) - np.log(p[row.reference])


def _softmax(theta: np.ndarray, row: SoftmaxRow, size: int) -> np.ndarray:
    z = np.zeros(size)
    z[row.free] = theta[row.slots]
    weights = np.zeros(size)
    zs = z[row.support]
    weights[row.support] = np.exp(zs - zs.max())
    return weights / weights.sum()


def _row(p: np.ndarray, next_slot: int) -> SoftmaxRow | None:
    support = np.flatnonzero(p > 0)
    if support.size < 2:
        return None
    reference = int(support[np.argmax(p[support])])
    free = support[support != reference]
    return SoftmaxRow(support, reference, free, np.arange(next_slot, next_slot + free.size))


def parameter_spec(model: StageModel) -> ParameterSpec:
    """The free-parameter layout of ``model`` (see the module docstring)."""
    names, kinds, lower, upper = [], [], [], []
    stages = model.stages

    def add(name, kind, bounds):
        names.append(name)
        kinds.append(kind)
        lower.append(bounds[0])
        upper.append(bounds[1])
        return len(names) - 1

    n_t = len(model.transitions)
    rate_slots = np.full(n_t, -1, dtype=np.int64)
    effect_slots = np.full((n_t, model.n_covariates), -1, dtype=np.int64)
    for i, t in enumerate(model.transitions):
        if not t.fixed_rate and t.rate > 0:
            rate_slots[i] = add(f"rate {stages[t.source]} -> {stages[t.target]}", "rate", LOG_RATE_BOUNDS)
    for i, t in enumerate(model.transitions):
        for k, cov in enumerate(model.covariates):
            if cov in t.effects and cov not in t.fixed_effects:
                effect_slots[i, k] = add(f"effect of {cov} on {stages[t.source]} -> {stages[t.target]}",
                                         "log_hazard_ratio", EFFECT_BOUNDS)
    emission_rows = []
    for channel in model.channels:
        rows = []
        for r in range(model.n_stages):
            row = None
            if r not in channel.fixed_stages:
                row = _row(np.asarray(channel.probabilities[r], float), len(names))
                if row is not None:
                    for k in row.free:
                        add(f"{channel.name}: P({channel.categories[k]} | {stages[r]})", "observation", LOGIT_BOUNDS)
            rows.append(row)
        emission_rows.append(tuple(rows))
    initial_row = None
    if not model.initial_fixed:
        initial_row = _row(np.asarray(model.initial, float), len(names))
        if initial_row is not None:
            for k in initial_row.free:
                add(f"initial P({stages[k]})", "initial", LOGIT_BOUNDS)
    contact_rate_slots = np.full(model.n_stages, -1, dtype=np.int64)
    contact_effect_slots = np.full(model.n_covariates, -1, dtype=np.int64)
    block = model.unscheduled_contacts
    if block is not None:
        positive = np.flatnonzero(np.asarray(block.rates) > 0)
        if not block.fixed and block.same_in_every_stage:
            contact_rate_slots[positive] = add("unscheduled contact rate, same in every stage", "unscheduled_rate",
                                               LOG_RATE_BOUNDS)
        elif not block.fixed:
            for r in positive:
                contact_rate_slots[r] = add(f"unscheduled contact rate in {stages[r]}", "unscheduled_rate",
                                            LOG_RATE_BOUNDS)
        for k, cov in enumerate(model.covariates):
            if cov in block.effects and cov not in block.fixed_effects:
                contact_effect_slots[k] = add(f"effect of {cov} on the unscheduled contact rate",
                                              "unscheduled_log_rate_ratio", EFFECT_BOUNDS)
    return ParameterSpec(model, tuple(names), tuple(kinds), rate_slots, effect_slots, tuple(emission_rows),
                         initial_row, np.array(lower, float), np.array(upper, float),
                         contact_rate_slots, contact_effect_slots)
