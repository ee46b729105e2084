"""The quantities a fit reports, each as a function of the free-parameter vector.

One list for everyone who needs them: the Wald (delta-method) intervals, the profile-likelihood
intervals and the tests' true values all evaluate the same functions, so a quantity can never be
named or computed two ways. The list is built from the :class:`~hmm.fitting.parameters.ParameterSpec`
(named parameters of the model's parametrisation), so new kinds of free parameter appear here by
adding them to the spec and to :func:`reported_quantities`.

Groups (as :class:`~hmm.fitting.result.FitResult` reports them):

* ``parameters``: every baseline rate (per day), log hazard ratio, observation probability and
  initial stage probability;
* ``hazard_ratios``: ``exp`` of each log hazard ratio (the interval is ``exp`` of the log's);
* ``mean_time_in_stage``: ``-1 / q_rr = 1 / (sum of rates out of r)`` days, covariates 0;
* ``next_stage_probabilities``: ``q_rs / -q_rr``.

Link scales (for intervals and standard errors): log for rates, hazard ratios and times, identity
for log hazard ratios, logit for probabilities.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .parameters import ParameterSpec

__all__ = ["QuantityTable", "reported_quantities", "to_link", "from_link"]


@dataclass(frozen=True)
class QuantityTable:
    """Names, kinds, links and the vector function of one group of reported quantities.

    Attributes
    ----------
    group : str
        ``'parameters'``, ``'hazard_ratios'``, ``'mean_time_in_stage'`` or ``'next_stage_probabilities'``.
    names, kinds, links : tuple of str, length q
    fixed : ndarray of bool, shape (q,)
        True when no free parameter moves the quantity.
    stages : tuple of (str or None), length q
        The stage a mean time in stage belongs to (None for the other kinds).
    function : callable(theta) -> ndarray, shape (q,)
        Natural-scale values for a free-parameter vector.
    """

    group: str
    names: tuple
    kinds: tuple
    links: tuple
    fixed: np.ndarray
    stages: tuple
    function: object

    def __len__(self) -> int:
        return len(self.names)

    def linked(self, theta: np.ndarray) -> np.ndarray:
        """The values on their link scales, shape (q,)."""
        return to_link(self.function(theta), np.asarray(self.links))


def to_link(values: np.ndarray, links: np.ndarray) -> np.ndarray:
    """Natural scale -> link scale (log, logit or identity), elementwise."""
    out = np.asarray(values, dtype=float).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        log = links == "log"
        out[log] = np.log(out[log])
        logit = links == "logit"
        out[logit] = np.log(out[logit]) - np.log1p(-out[logit])
    return out


def from_link(values: np.ndarray, links: np.ndarray) -> np.ndarray:
    """Link scale -> natural scale, elementwise (infinite ends map to 0, 1 or infinity)."""
    out = np.asarray(values, dtype=float).copy()
    log = links == "log"
    logit = links == "logit"
    with np.errstate(over="ignore"):
        out[log] = np.exp(out[log])
        out[logit] = 1.0 / (1.0 + np.exp(-out[logit]))
    return out


def reported_quantities(spec: ParameterSpec) -> tuple:
    """The four :class:`QuantityTable` groups of ``spec``'s model, in reporting order."""
    m = spec.template
    names, kinds, links, fixed, picks = [], [], [], [], []
    for i, t in enumerate(m.transitions):
        names.append(f"rate {m.stages[t.source]} -> {m.stages[t.target]} (per day)")
        kinds.append("rate"), links.append("log"), fixed.append(spec.rate_slots[i] < 0)
        picks.append(("rate", i))
    effect_picks = []
    for i, t in enumerate(m.transitions):
        for k, cov in enumerate(m.covariates):
            if cov in t.effects:
                names.append(f"log hazard ratio of {cov} on {m.stages[t.source]} -> {m.stages[t.target]}")
                kinds.append("log_hazard_ratio"), links.append("identity"), fixed.append(spec.effect_slots[i, k] < 0)
                picks.append(("effect", i, k))
                effect_picks.append((len(picks) - 1, f"hazard ratio of {cov} on {m.stages[t.source]} -> "
                                                     f"{m.stages[t.target]}"))
    for c, channel in enumerate(m.channels):
        for r in range(m.n_stages):
            for k, cat in enumerate(channel.categories):
                names.append(f"{channel.name}: P({cat} | {m.stages[r]})")
                kinds.append("observation"), links.append("logit"), fixed.append(spec.emission_rows[c][r] is None)
                picks.append(("emission", c, r, k))
    for r, stage in enumerate(m.stages):
        names.append(f"initial P({stage})")
        kinds.append("initial"), links.append("logit"), fixed.append(spec.initial_row is None)
        picks.append(("initial", r))
    _add_unscheduled_quantities(spec, names, kinds, links, fixed, picks)

    def natural(theta):
        a = spec.arrays(theta)
        out = np.empty(len(picks))
        for j, pick in enumerate(picks):
            if pick[0] == "rate":
                out[j] = a.rates[pick[1]]
            elif pick[0] == "effect":
                out[j] = a.effects[pick[1], pick[2]]
            elif pick[0] == "emission":
                out[j] = a.emissions[pick[1]][pick[2], pick[3]]
            elif pick[0] == "unscheduled_rate":
                out[j] = a.unscheduled_rates[pick[1]]
            elif pick[0] == "unscheduled_effect":
                out[j] = a.unscheduled_effects[pick[1]]
            else:
                out[j] = a.initial[pick[1]]
        return out

    parameters = QuantityTable("parameters", tuple(names), tuple(kinds), tuple(links), np.array(fixed, bool),
                               (None,) * len(names), natural)
    effect_rows = np.array([j for j, _ in effect_picks], dtype=np.int64)
    hazard = QuantityTable("hazard_ratios", tuple(n for _, n in effect_picks), ("hazard_ratio",) * len(effect_picks),
                           ("log",) * len(effect_picks), np.array(fixed, bool)[effect_rows],
                           (None,) * len(effect_picks),
                           lambda theta: np.exp(natural(theta)[effect_rows]))

    src = np.array([t.source for t in m.transitions], dtype=np.int64)
    transient = sorted(set(src.tolist()))
    fixed_rates = spec.rate_slots < 0

    def sojourn(theta):
        rates = spec.arrays(theta).rates
        return np.array([1.0 / rates[src == r].sum() for r in transient])

    mean_time = QuantityTable("mean_time_in_stage", tuple(f"mean time in {m.stages[r]} (days)" for r in transient),
                              ("mean_time_in_stage",) * len(transient), ("log",) * len(transient),
                              np.array([fixed_rates[src == r].all() for r in transient], bool),
                              tuple(m.stages[r] for r in transient), sojourn)
    pairs = [(i, t.source, t.target) for i, t in enumerate(m.transitions)]

    def next_stage(theta):
        rates = spec.arrays(theta).rates
        return np.array([rates[i] / rates[src == r].sum() for i, r, _ in pairs])

    nxt = QuantityTable("next_stage_probabilities",
                        tuple(f"next stage after {m.stages[r]} is {m.stages[s]}" for _, r, s in pairs),
                        ("next_stage_probability",) * len(pairs), ("logit",) * len(pairs),
                        np.array([fixed_rates[src == r].all() for _, r, _ in pairs], bool), (None,) * len(pairs),
                        next_stage)
    return parameters, hazard, mean_time, nxt


def _add_unscheduled_quantities(spec: ParameterSpec, names, kinds, links, fixed, picks) -> None:
    """Rows for the unscheduled contact rates (per day, log link) and their log rate ratios, if any."""
    m = spec.template
    block = m.unscheduled_contacts
    if block is None:
        return
    for r, stage in enumerate(m.stages):
        names.append(f"unscheduled contacts in {stage} (per day)")
        kinds.append("unscheduled_rate"), links.append("log"), fixed.append(spec.unscheduled_rate_slots[r] < 0)
        picks.append(("unscheduled_rate", r))
    for k, cov in enumerate(m.covariates):
        if cov in block.effects:
            names.append(f"log rate ratio of {cov} on unscheduled contacts")
            kinds.append("unscheduled_log_rate_ratio"), links.append("identity")
            fixed.append(spec.unscheduled_effect_slots[k] < 0)
            picks.append(("unscheduled_effect", k))
