"""The stage model: stages, transition rates with covariate effects, observation channels.

A :class:`StageModel` is an immutable description of a continuous-time hidden-Markov model:

* ordered stages, an initial stage distribution that applies at each case's first contact;
* allowed transitions ``r -> s`` with a baseline rate per day and covariate effects as log
  hazard ratios, ``q_rs(x) = rate_rs * exp(sum_k beta_rs,k * x_k)``;
* categorical observation channels, independent given the stage, each with a per-stage row
  of category probabilities (misclassification / emission probabilities);
* stages with no way out are absorbing.

Everything here is plain numpy; parsing files is the application's job (``caseview.modelfile``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

__all__ = ["Transition", "Channel", "StageModel", "ModelError", "MAX_RATE_PER_DAY", "MIN_POSITIVE_RATE_PER_DAY",
           "UNDECLARED_RANGE",
           "largest_rate", "rate_limit_problem", "UnscheduledContacts"]

#: Largest transition rate per day a model may reach anywhere in its covariate ranges.
#: Records are kept by the day, so any rate above a few per day already means "at once"; this bound
#: is far above that (a mean stay of 9 microseconds) so it never rejects a model that means
#: something - fitted rates stop at 10 per day and fitted hazard ratios at exp(20), whose product is
#: 4.9e9 - and far below float overflow (1.8e308): Q * gap then stays under 1.1e15 over the longest
#: gap the accepted dates allow (1900-2199, 110,000 days), where scipy's expm (scaling and squaring)
#: and the eigen path still return stochastic matrices (tests/engine/test_rate_limits.py checks it).
#: Larger values come from typos (1e100) or runaway effects (800 per unit) and made every
#: probability of the affected cases zero.
MAX_RATE_PER_DAY = 1e10
#: Smallest value a positive rate may fall to over the covariate ranges: below it ``exp`` underflows
#: to zero (float64's smallest normal number is 2.2e-308), so a move the model allows would silently
#: become impossible for some covariate values (effects of -800). A rate of exactly 0 rules a move out.
MIN_POSITIVE_RATE_PER_DAY = 1e-300
#: Covariate values assumed when checking a model whose covariate has no declared range: one unit
#: either side of zero ("one unit of the covariate may not push a rate past the limit").
UNDECLARED_RANGE = (-1.0, 1.0)


def largest_rate(rate: float, effects: dict, ranges: dict, smallest: bool = False) -> tuple:
    """Largest (or ``smallest``) value of ``rate * exp(beta . x)`` over a box of covariate values, on the log scale.

    Parameters
    ----------
    rate : float
        Baseline rate per day (covariates at zero), >= 0.
    effects : dict[str, float]
        Log hazard ratio per covariate name.
    ranges : dict[str, tuple[float, float]]
        ``(low, high)`` per covariate; a covariate without one uses :data:`UNDECLARED_RANGE`.

    Returns
    -------
    log_rate : float
        ``log`` of the largest rate (``-inf`` for a zero rate); the maximum of a linear function
        over a box is at a corner, and each covariate's corner is chosen on its own.
    corner : dict[str, float]
        The covariate values where it is reached.
    """
    if rate <= 0:
        return -np.inf, {}
    log_rate = float(np.log(rate))
    corner = {}
    for name, beta in effects.items():
        low, high = ranges.get(name) or UNDECLARED_RANGE
        x = high if (beta * high >= beta * low) != smallest else low
        corner[name] = x
        log_rate += float(beta) * float(x)
    return log_rate, corner


def rate_limit_problem(rate: float, effects: dict, ranges: dict) -> str | None:
    """Why ``rate * exp(beta . x)`` leaves the finite range allowed over the covariate ranges, or None.

    The one rule for model values (model files, fitted models and :class:`StageModel` alike);
    the limit is :data:`MAX_RATE_PER_DAY`.
    """
    limit = f"above the limit of {MAX_RATE_PER_DAY:g} per day"
    if not np.isfinite(rate) or rate > MAX_RATE_PER_DAY:
        return f"the rate {rate:g} per day is {limit} (a typing error?)"
    log_rate, corner = largest_rate(rate, effects, ranges)
    if np.isnan(log_rate) or log_rate > np.log(MAX_RATE_PER_DAY):
        at = ", ".join(f"{k} = {v:g}" + ("" if ranges.get(k) else " (no range declared, so -1..1 is checked)")
                       for k, v in corner.items() if effects.get(k))
        return (f"with {at} the rate reaches {rate:g} * exp({log_rate - np.log(rate):.4g}) per day, {limit} "
                "(an effect far too large for the covariate's values? declare the covariate's range)")
    log_low, corner = largest_rate(rate, effects, ranges, smallest=True)
    if rate > 0 and log_low < np.log(MIN_POSITIVE_RATE_PER_DAY):
        at = ", ".join(f"{k} = {v:g}" for k, v in corner.items() if effects.get(k))
        return (f"with {at} the rate falls to {rate:g} * exp({log_low - np.log(rate):.4g}) per day, below "
                f"{MIN_POSITIVE_RATE_PER_DAY:g}: it would vanish in floating point (a degenerate generator); use "
                "a rate of 0 to rule a move out")
    return None


class ModelError(ValueError):
    """A stage model that is not internally consistent."""


@dataclass(frozen=True)
class Transition:
    """One allowed move between stages.

    Parameters
    ----------
    source, target : int
        Stage indices.
    rate : float
        Baseline transition rate per day (covariates all zero).
    effects : dict[str, float]
        Log hazard ratio per covariate name.
    fixed_rate : bool
        Keep ``rate`` at its value when fitting.
    fixed_effects : frozenset[str]
        Covariate effects kept at their value when fitting.
    """

    source: int
    target: int
    rate: float
    effects: dict = field(default_factory=dict)
    fixed_rate: bool = False
    fixed_effects: frozenset = frozenset()


@dataclass(frozen=True)
class Channel:
    """A categorical observation channel.

    Parameters
    ----------
    name : str
    categories : tuple[str, ...]
    probabilities : ndarray, shape (n_stages, n_categories)
        Row ``r`` is the distribution of the recorded category given stage ``r``.
    fixed_stages : frozenset[int]
        Stage rows kept at their value when fitting.
    """

    name: str
    categories: tuple
    probabilities: np.ndarray
    fixed_stages: frozenset = frozenset()

    @property
    def n_categories(self) -> int:
        return len(self.categories)


@dataclass(frozen=True)
class UnscheduledContacts:
    """Stage-dependent timing of unscheduled contacts (the optional "unscheduled_contacts" block).

    Unscheduled contacts (a fall, a worried call) arrive as a Poisson process whose rate depends on
    the hidden stage: ``lambda_s(x) = rates[s] * exp(sum_k effects[k] * x_k)`` per day, with the
    covariates ``x`` of the previous contact. Scheduled contacts carry no timing information.

    Parameters
    ----------
    rates : ndarray, shape (n_stages,)
        Baseline rate per day in each stage (0 = no unscheduled contacts in that stage; kept at 0
        when fitting).
    effects : dict[str, float]
        Log rate ratio per covariate name (the same in every stage).
    fixed : bool
        Keep ``rates`` at their values when fitting.
    fixed_effects : frozenset[str]
        Effects kept at their value when fitting.
    same_in_every_stage : bool
        The rates are one common value in every stage with a non-zero rate (fitted as one
        parameter): the timing-informative model's nested restriction, in which the timing of
        contacts says nothing about the stage.
    """

    rates: np.ndarray
    effects: dict = field(default_factory=dict)
    fixed: bool = False
    fixed_effects: frozenset = frozenset()
    same_in_every_stage: bool = False

    def rates_at(self, covariates: np.ndarray, covariate_names: tuple) -> np.ndarray:
        """Rates per day for many covariate rows.

        Parameters
        ----------
        covariates : ndarray, shape (m, n_covariates)
        covariate_names : tuple of str
            Column names of ``covariates``.

        Returns
        -------
        ndarray, shape (m, n_stages)
        """
        x = np.atleast_2d(np.asarray(covariates, dtype=float))
        rates = np.asarray(self.rates, dtype=float)
        if not self.effects:
            return np.broadcast_to(rates, (x.shape[0], rates.size)).copy()
        gamma = np.array([self.effects.get(name, 0.0) for name in covariate_names])
        return rates[None, :] * np.exp(x @ gamma)[:, None]


@dataclass(frozen=True)
class StageModel:
    """A continuous-time hidden-Markov stage model (immutable).

    Parameters
    ----------
    stages : tuple[str, ...]
    initial : ndarray, shape (n_stages,)
        Stage distribution at each case's first recorded contact.
    transitions : tuple[Transition, ...]
    channels : tuple[Channel, ...]
    covariates : tuple[str, ...]
        Covariate names, in the column order used by ``covariate_values`` arrays.
    follow_up_stages : tuple[str, ...]
        Stages that call for follow-up (used by the application's rules).
    exact_entry_stages : tuple[str, ...]
        Absorbing stages whose entry date is known exactly when recorded.
    covariate_ranges : tuple
        Empty, or one ``(low, high)`` pair or None per covariate: the values the model is meant
        for. Rates are checked against :data:`MAX_RATE_PER_DAY` over these ranges; the
        application refuses and does not score covariate values outside them.
    initial_fixed : bool
        Keep ``initial`` at its value when fitting.
    name : str
    unscheduled_contacts : UnscheduledContacts or None
        Stage-dependent timing of unscheduled contacts; None (the default) means contact times
        carry no information.
    """

    stages: tuple
    initial: np.ndarray
    transitions: tuple
    channels: tuple = ()
    covariates: tuple = ()
    follow_up_stages: tuple = ()
    exact_entry_stages: tuple = ()
    initial_fixed: bool = False
    name: str = "stage model"
    unscheduled_contacts: UnscheduledContacts | None = None
    covariate_ranges: tuple = ()

    def __post_init__(self):
        self.validate()

    # ------------------------------------------------------------------ checks
    def validate(self) -> None:
        """Raise :class:`ModelError` with a precise message if anything is inconsistent."""
        from .model_rules import (exact_entry_problem, first_duplicate, name_clash_problem, self_transition_problem,
                                  stage_count_problem, sum_to_one_problem)

        n = len(self.stages)
        problem = stage_count_problem(n)
        if problem:
            raise ModelError(f"stages: {problem}")
        duplicate = first_duplicate(self.stages)
        if duplicate:
            raise ModelError(f"stages[{duplicate[0]}]: {duplicate[1]}")
        initial = np.asarray(self.initial, dtype=float)
        if initial.shape != (n,):
            raise ModelError(f"initial distribution has {initial.size} values, expected {n}")
        problem = sum_to_one_problem(initial)
        if problem:
            raise ModelError(f"initial: {problem}")
        seen = set()
        for i, t in enumerate(self.transitions):
            if not (0 <= t.source < n and 0 <= t.target < n):
                raise ModelError(f"transition {t.source}->{t.target} refers to a stage that does not exist")
            problem = self_transition_problem(self.stages[t.source], self.stages[t.target])
            if problem:
                raise ModelError(f"transitions[{i}]: {problem}")
            key = (t.source, t.target)
            if key in seen:
                raise ModelError(f"transition {self.stages[t.source]} -> {self.stages[t.target]} is listed twice")
            seen.add(key)
            if not np.isfinite(t.rate) or t.rate < 0:
                raise ModelError(
                    f"transition {self.stages[t.source]} -> {self.stages[t.target]}: rate must be a "
                    f"non-negative number per day, got {t.rate!r}")
            for cov, beta in t.effects.items():
                if cov not in self.covariates:
                    raise ModelError(
                        f"transition {self.stages[t.source]} -> {self.stages[t.target]}: effect of unknown "
                        f"covariate {cov!r} (declared covariates: {', '.join(self.covariates) or 'none'})")
                if not np.isfinite(beta):
                    raise ModelError(f"effect of {cov!r} on {self.stages[t.source]} -> "
                                     f"{self.stages[t.target]} must be a finite number")
        duplicate = first_duplicate(self.covariates)
        if duplicate:
            raise ModelError(f"covariates[{duplicate[0]}]: {duplicate[1]}")
        if self.covariate_ranges:
            if len(self.covariate_ranges) != len(self.covariates):
                raise ModelError(f"covariate_ranges has {len(self.covariate_ranges)} entries, expected one per "
                                 f"covariate ({len(self.covariates)})")
            for name, bounds in zip(self.covariates, self.covariate_ranges):
                if bounds is not None and not (len(bounds) == 2 and np.all(np.isfinite(bounds))
                                               and bounds[0] <= bounds[1]):
                    raise ModelError(f"covariate {name!r}: range must be two finite numbers low <= high, "
                                     f"got {bounds!r}")
        ranges = self.range_of
        for t in self.transitions:
            problem = rate_limit_problem(t.rate, t.effects, ranges)
            if problem:
                raise ModelError(f"transition {self.stages[t.source]} -> {self.stages[t.target]}: {problem}")
        names = [c.name for c in self.channels]
        duplicate = first_duplicate(names)
        if duplicate:
            raise ModelError(f"channels[{duplicate[0]}]: {duplicate[1]}")
        problem = name_clash_problem(names, self.covariates)
        if problem:
            raise ModelError(f"channels: {problem}")
        for i, c in enumerate(self.channels):
            p = np.asarray(c.probabilities, dtype=float)
            duplicate = first_duplicate(c.categories)
            if duplicate:
                raise ModelError(f"channels[{i}].categories[{duplicate[0]}]: {duplicate[1]}")
            if p.shape != (n, len(c.categories)):
                raise ModelError(f"channel {c.name!r}: probabilities must have one row per stage and one "
                                 f"column per category, shape {(n, len(c.categories))}, got {p.shape}")
            for r in range(n):
                problem = sum_to_one_problem(p[r])
                if problem:
                    raise ModelError(f"channels[{i}].probabilities.{self.stages[r]}: {problem}")
        for s in self.follow_up_stages + self.exact_entry_stages:
            if s not in self.stages:
                raise ModelError(f"unknown stage {s!r} (stages: {', '.join(self.stages)})")
        for j, s in enumerate(self.exact_entry_stages):
            problem = exact_entry_problem(s, self.stage_index(s) not in self.absorbing_stages)
            if problem:
                raise ModelError(f"exact_entry_stages[{j}]: {problem}")
        if self.unscheduled_contacts is not None:
            self._validate_unscheduled(self.unscheduled_contacts)

    def _validate_unscheduled(self, block: UnscheduledContacts) -> None:
        rates = np.asarray(block.rates, dtype=float)
        if rates.shape != (self.n_stages,):
            raise ModelError(f"unscheduled contact rates: {rates.size} values, expected one per stage "
                             f"({self.n_stages})")
        for stage, rate in zip(self.stages, rates):
            if not np.isfinite(rate) or rate < 0:
                raise ModelError(f"unscheduled contact rate in {stage}: must be a non-negative number per day, "
                                 f"got {rate!r}")
        if not np.any(rates > 0):
            raise ModelError("unscheduled contact rates: at least one stage needs a rate above 0")
        if block.same_in_every_stage and np.ptp(rates[rates > 0]) > 1e-12 * rates.max():
            raise ModelError("unscheduled contact rates must be equal in every stage with a non-zero rate "
                             "when they are the same in every stage")
        for cov, value in block.effects.items():
            if cov not in self.covariates:
                raise ModelError(f"unscheduled contacts: effect of unknown covariate {cov!r} "
                                 f"(declared covariates: {', '.join(self.covariates) or 'none'})")
            if not np.isfinite(value):
                raise ModelError(f"unscheduled contacts: effect of {cov!r} must be a finite number")
        for cov in block.fixed_effects:
            if cov not in block.effects:
                raise ModelError(f"unscheduled contacts: {cov!r} has no effect to keep fixed")

    # ------------------------------------------------------------- properties
    @property
    def n_stages(self) -> int:
        return len(self.stages)

    @property
    def n_covariates(self) -> int:
        return len(self.covariates)

    def stage_index(self, name: str) -> int:
        try:
            return self.stages.index(name)
        except ValueError:
            raise ModelError(f"unknown stage {name!r} (stages: {', '.join(self.stages)})") from None

    @property
    def range_of(self) -> dict:
        """Declared ``(low, high)`` per covariate name (covariates without a range are left out)."""
        if not self.covariate_ranges:
            return {}
        return {name: (float(b[0]), float(b[1])) for name, b in zip(self.covariates, self.covariate_ranges)
                if b is not None}

    def with_covariate_ranges(self, ranges: dict) -> "StageModel":
        """A copy whose covariates have these ranges ``{name: (low, high)}`` (others keep theirs)."""
        current = self.range_of
        current.update({k: (float(v[0]), float(v[1])) for k, v in ranges.items()})
        return replace(self, covariate_ranges=tuple(current.get(name) for name in self.covariates))

    def usable_covariate_rows(self, covariate_values: np.ndarray) -> np.ndarray:
        """Which covariate rows give a generator the engine can use, ndarray of bool, shape (m,).

        False where a rate ``rate * exp(beta . x)`` is not finite or exceeds
        :data:`MAX_RATE_PER_DAY` (computed on the log scale, so nothing overflows).
        """
        x = np.atleast_2d(np.asarray(covariate_values, dtype=float))
        active = [t for t in self.transitions if t.rate > 0]
        if not x.size or not active:
            return np.all(np.isfinite(x), axis=1)
        limit = np.log(MAX_RATE_PER_DAY)
        log_rates = np.log([t.rate for t in active])
        beta = np.array([[t.effects.get(name, 0.0) for t in active] for name in self.covariates]).reshape(
            self.n_covariates, len(active))
        low = np.array([x[:, k].min() for k in range(x.shape[1])])    # column by column: far faster on
        high = np.array([x[:, k].max() for k in range(x.shape[1])])   # a tall (n, K) array than axis=0
        if np.all(np.isfinite(low)) and np.all(np.isfinite(high)):
            # the largest log rate over the box the values span bounds every row's: usually all is well
            with np.errstate(all="ignore"):
                worst = log_rates + np.maximum(beta * low[:, None], beta * high[:, None]).sum(axis=0)
            if np.all(worst <= limit):
                return np.ones(x.shape[0], dtype=bool)
        ok = np.all(np.isfinite(x), axis=1)
        with np.errstate(all="ignore"):
            row_log_rates = np.where(ok[:, None], x, 0.0) @ beta + log_rates
        return ok & np.all(np.isfinite(row_log_rates) & (row_log_rates <= limit), axis=1)

    @property
    def absorbing_stages(self) -> tuple:
        """Indices of stages with no allowed way out."""
        out = {t.source for t in self.transitions}
        return tuple(r for r in range(self.n_stages) if r not in out)

    @property
    def follow_up_mask(self) -> np.ndarray:
        """Boolean mask over stages, True for follow-up stages."""
        mask = np.zeros(self.n_stages, dtype=bool)
        for s in self.follow_up_stages:
            mask[self.stage_index(s)] = True
        return mask

    def transition(self, source: str, target: str) -> Transition:
        r, s = self.stage_index(source), self.stage_index(target)
        for t in self.transitions:
            if (t.source, t.target) == (r, s):
                return t
        raise ModelError(f"no transition {source} -> {target} in the model")

    # ------------------------------------------------------------- generators
    def baseline_rate_matrix(self) -> np.ndarray:
        """Off-diagonal baseline rates, shape (n_stages, n_stages), zero where not allowed."""
        rates = np.zeros((self.n_stages, self.n_stages))
        for t in self.transitions:
            rates[t.source, t.target] = t.rate
        return rates

    def effect_array(self) -> np.ndarray:
        """Log hazard ratios, shape (n_stages, n_stages, n_covariates)."""
        beta = np.zeros((self.n_stages, self.n_stages, self.n_covariates))
        for t in self.transitions:
            for cov, value in t.effects.items():
                beta[t.source, t.target, self.covariates.index(cov)] = value
        return beta

    def generators(self, covariate_values: np.ndarray) -> np.ndarray:
        """Generator matrices for many covariate vectors.

        Parameters
        ----------
        covariate_values : ndarray, shape (m, n_covariates) or (n_covariates,)

        Returns
        -------
        Q : ndarray, shape (m, n_stages, n_stages) (or (n_stages, n_stages) for one vector)
            Rows sum to zero; ``Q[r, s] = rate_rs * exp(beta_rs . x)`` off the diagonal.
        """
        x = np.asarray(covariate_values, dtype=float)
        single = x.ndim == 1
        x = np.atleast_2d(x)
        if x.shape[1] != self.n_covariates:
            raise ModelError(f"expected {self.n_covariates} covariate values per row, got {x.shape[1]}")
        rates = self.baseline_rate_matrix()
        if self.n_covariates:
            q = rates[None] * np.exp(np.einsum("rsk,mk->mrs", self.effect_array(), x))
        else:
            q = np.broadcast_to(rates, (x.shape[0],) + rates.shape).copy()
        idx = np.arange(self.n_stages)
        q[:, idx, idx] = 0.0
        q[:, idx, idx] = -q.sum(axis=2)
        return q[0] if single else q

    def generator(self, covariate_values=None) -> np.ndarray:
        """Generator matrix Q, shape (n_stages, n_stages), for one covariate vector (default all zero)."""
        if covariate_values is None:
            covariate_values = np.zeros(self.n_covariates)
        return self.generators(np.asarray(covariate_values, dtype=float).reshape(-1))

    def unscheduled_rates(self, covariate_values: np.ndarray) -> np.ndarray | None:
        """Unscheduled contact rates per day, shape (m, n_stages), or None without the block."""
        if self.unscheduled_contacts is None:
            return None
        x = np.atleast_2d(np.asarray(covariate_values, dtype=float))
        return self.unscheduled_contacts.rates_at(x, self.covariates)

    def quiet_generators(self, covariate_values: np.ndarray) -> np.ndarray:
        """``Q - Lambda`` for many covariate rows: the sub-generator of "no unscheduled contact meanwhile".

        Parameters
        ----------
        covariate_values : ndarray, shape (m, n_covariates)

        Returns
        -------
        ndarray, shape (m, n_stages, n_stages)
            Rows sum to ``-lambda_s(x)``; exactly :meth:`generators` without the block.
        """
        q = self.generators(np.atleast_2d(np.asarray(covariate_values, dtype=float)))
        rates = self.unscheduled_rates(covariate_values)
        if rates is not None:
            idx = np.arange(self.n_stages)
            q[:, idx, idx] -= rates
        return q

    def emission_matrices(self) -> tuple:
        """Per-channel probability tables, each ndarray shape (n_stages, n_categories)."""
        return tuple(np.asarray(c.probabilities, dtype=float) for c in self.channels)

    # ------------------------------------------------------------------ edits
    def with_rates(self, rates: dict) -> "StageModel":
        """A copy with some baseline rates replaced: ``{(source_name, target_name): rate}``."""
        new = []
        for t in self.transitions:
            key = (self.stages[t.source], self.stages[t.target])
            new.append(replace(t, rate=float(rates[key])) if key in rates else t)
        return replace(self, transitions=tuple(new))
