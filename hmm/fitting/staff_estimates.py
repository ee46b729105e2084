"""A stage model from staff estimates: typical stays, where people go next, how often checks are wrong.

A team with few cases can start scoring from what experienced staff know and fit the model later
(the result is an ordinary :class:`~hmm.StageModel`; nothing in it is fixed except the check rows
of stages that are never checked, see below).

The estimates, in plain numbers (keyword arguments of :func:`model_from_staff_estimates`):

* ``typical_stay_days[stage]``: the mean time (days) people stay in the stage before moving on,
  for a person with every covariate at 0; ``None`` (or ``math.inf``) for a stage people never
  leave (absorbing);
* ``next_stage[stage]``: ``{other stage: share}``, the share of moves out of ``stage`` that go to
  each other stage; the shares of a stage people leave add up to 1 (within 1e-6; they are then
  rescaled to add up to exactly 1). A share of 0 (or leaving a stage out) means that move does
  not happen;
* ``checks``: one :class:`CheckEstimate` per observation channel. For each stage, either the
  probability of every recorded category (a sequence adding up to 1), or a :class:`UsualResult`:
  the category usually recorded in that stage and how often the result is something else
  ("wrong"), that share being spread *evenly* over the other categories. Staff who think the
  wrong results lean one way (for example "slow" rather than "unable") give the full row
  instead. Stages people never leave may be left out: their row is then even (the check says
  nothing about that stage) and fixed when fitting;
* ``initial[stage]``: the share of cases in each stage at their first contact (adds up to 1);
* ``hazard_ratios[(from, to)]``: ``{covariate: hazard ratio}``, how much the covariate multiplies
  the rate of that move (1 = no effect; listing a ratio of 1 lets a later fit estimate it).

The mathematics is the jump-chain description of a continuous-time Markov chain (Norris, *Markov
Chains*, 1997, sections 2.6 and 3.1; Ross, *Introduction to Probability Models*, ch. 6): a chain in
stage r stays an exponential time with rate ``-q_rr`` (mean ``-1 / q_rr``) and then jumps to s with
probability ``q_rs / -q_rr``, independently of the time spent. So, given the mean stay ``m_r`` and
the jump probabilities ``pi_rs``::

    q_rr = -1 / m_r,        q_rs = pi_rs / m_r,

and the model's mean time in each stage and next-stage probabilities (the quantities a fit reports,
:func:`hmm.fitting.uncertainty.derived_estimates`) equal the estimates given, up to rounding.
Covariate effects are log hazard ratios, ``q_rs(x) = q_rs * exp(sum_k log(HR_rs,k) x_k)``.

Every problem is reported as a :class:`Problem` with a ``path`` of keys (for example
``("next_stage", "Slipping")``) and a message that names the stage, so a file reader can turn the
path into a JSON path and a window can highlight the cell.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Real

import numpy as np

from ..model import Channel, ModelError, StageModel, Transition
from ..model_rules import exact_entry_problem, first_duplicate, name_clash_problem, stage_count_problem

__all__ = ["UsualResult", "CheckEstimate", "Problem", "StaffEstimateError", "model_from_staff_estimates",
           "staff_estimate_problems", "staff_estimates_from_model", "check_probabilities", "SUM_TOLERANCE"]

#: Shares and probabilities must add up to 1 within this (the model file uses the same).
SUM_TOLERANCE = 1e-6


@dataclass(frozen=True)
class UsualResult:
    """A check result given as the usual category and the share of results that are another one.

    ``wrong_share`` is in (0, 1) and is spread evenly over the other categories.
    """

    category: str
    wrong_share: float


@dataclass(frozen=True)
class CheckEstimate:
    """Staff estimates for one observation channel.

    Parameters
    ----------
    name : str
    categories : tuple of str
    results : dict
        Stage name -> a sequence of probabilities (one per category, adding up to 1) or a
        :class:`UsualResult`.
    """

    name: str
    categories: tuple
    results: dict


@dataclass(frozen=True)
class Problem:
    """One thing wrong with the estimates: where (a tuple of keys) and what, in plain words."""

    path: tuple
    message: str

    def __str__(self) -> str:
        return self.message


class StaffEstimateError(ValueError):
    """Estimates that cannot make a model; ``problem`` says where and why."""

    def __init__(self, problem: Problem):
        super().__init__(problem.message)
        self.problem = problem

    @property
    def path(self) -> tuple:
        return self.problem.path


def _is_number(value) -> bool:
    return isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value)


def _never_leaves(value) -> bool:
    return value is None or (isinstance(value, Real) and not isinstance(value, bool) and value == math.inf)


def check_probabilities(categories, result) -> np.ndarray:
    """The probability row, shape (n_categories,), of a check result given either way (assumed valid)."""
    if isinstance(result, UsualResult):
        k = len(categories)
        row = np.full(k, float(result.wrong_share) / (k - 1))
        row[list(categories).index(result.category)] = 1.0 - float(result.wrong_share)
        return row
    row = np.asarray(result, dtype=float)
    return row / row.sum()


def _check_row(problems, where, stage, check, result) -> None:
    k = len(check.categories)
    if isinstance(result, UsualResult):
        if result.category not in check.categories:
            problems.append(Problem(where + ("usual",), f"check {check.name!r}, stage {stage!r}: the usual result "
                                    f"{result.category!r} is not one of {', '.join(check.categories)}"))
        if not _is_number(result.wrong_share) or not 0.0 < result.wrong_share < 1.0:
            problems.append(Problem(where + ("wrong",), f"check {check.name!r}, stage {stage!r}: how often the "
                                    f"result is wrong must be a share above 0 and below 1, got "
                                    f"{result.wrong_share!r} (0 would make the other results impossible, even "
                                    "after fitting)"))
        return
    try:
        values = list(result)
    except TypeError:
        values = None
    if values is None or len(values) != k:
        problems.append(Problem(where, f"check {check.name!r}, stage {stage!r}: expected {k} probabilities (one per "
                                f"result: {', '.join(check.categories)}), got {result!r}"))
        return
    for j, v in enumerate(values):
        if not _is_number(v) or not 0.0 <= v <= 1.0:
            problems.append(Problem(where + (j,), f"check {check.name!r}, stage {stage!r}: the probability of "
                                    f"{check.categories[j]!r} must be between 0 and 1, got {v!r}"))
            return
    total = float(sum(values))
    if abs(total - 1.0) > SUM_TOLERANCE:
        problems.append(Problem(where, f"check {check.name!r}, stage {stage!r}: the probabilities add up to "
                                f"{total:.6g}; expected 1"))


def _rates_out(problems, r, stage, stages, index, typical_stay_days, next_stage, rates, leaves) -> None:
    """Check one stage's typical stay and next-stage shares; fill row ``r`` of ``rates``."""
    if stage not in typical_stay_days:
        problems.append(Problem(("typical_stay_days", stage), f"stage {stage!r}: no typical stay given (days, "
                                "or 'never leaves')"))
        return
    stay = typical_stay_days[stage]
    shares = next_stage.get(stage) or {}
    if not isinstance(shares, dict):
        problems.append(Problem(("next_stage", stage), f"stage {stage!r}: expected the share of moves to each "
                                f"other stage, e.g. {{'Stable': 0.4, 'Struggling': 0.6}}, got {shares!r}"))
        return
    if _never_leaves(stay):
        moving = {t: v for t, v in shares.items() if not (_is_number(v) and v == 0)}
        if moving:
            problems.append(Problem(("next_stage", stage), f"stage {stage!r} is marked 'never leaves' but has "
                                    f"shares of moves to {', '.join(map(str, moving))}; remove them or give "
                                    "a typical stay"))
        return
    if not _is_number(stay) or stay <= 0:
        problems.append(Problem(("typical_stay_days", stage), f"stage {stage!r}: the typical stay must be a "
                                f"positive number of days (or 'never leaves'), got {stay!r}"))
        return
    leaves[r] = True
    row_ok = True
    for target, share in shares.items():
        if target not in index:
            problems.append(Problem(("next_stage", stage, target), f"stage {stage!r}: unknown next stage "
                                    f"{target!r} (stages: {', '.join(stages)})"))
            row_ok = False
        elif target == stage:
            problems.append(Problem(("next_stage", stage, target), f"stage {stage!r}: a move to itself is not "
                                    "a move; leave it out (the typical stay covers staying)"))
            row_ok = False
        elif not _is_number(share) or share < 0 or share > 1:
            problems.append(Problem(("next_stage", stage, target), f"stage {stage!r}: the share of moves to "
                                    f"{target!r} must be between 0 and 1, got {share!r}"))
            row_ok = False
    if not row_ok:
        return
    total = float(sum(shares.values()))
    if abs(total - 1.0) > SUM_TOLERANCE:
        problems.append(Problem(("next_stage", stage), f"stage {stage!r}: the shares of where people go next "
                                f"add up to {total:.6g}; expected 1 (every move out of a stage goes "
                                "somewhere)" + ("" if shares else "; give at least one next stage")))
        return
    for target, share in shares.items():
        # q_rs = pi_rs / m_r (jump chain; Norris 1997, section 2.6), shares rescaled to add up to exactly 1
        rates[r, index[target]] = (share / total) / float(stay)


class _Estimates:
    """The stages being described and the problems found so far (shared by the steps of :func:`_build`)."""

    def __init__(self, stages: tuple):
        self.stages = stages
        self.index = {s: i for i, s in enumerate(stages)}
        self.n = len(stages)
        self.problems = []

    def unknown_stage(self, path, value, what="stage"):
        self.problems.append(Problem(path, f"unknown {what} {value!r} (stages: {', '.join(self.stages)})"))


def _build(stages, typical_stay_days, next_stage, initial, checks, covariates, hazard_ratios, follow_up_stages,
           exact_entry_stages, name):
    """Validate everything; return (StageModel or None, list of Problem)."""
    stages = tuple(stages)
    stage_problems = _stage_name_problems(stages)
    if stage_problems:
        return None, stage_problems
    e = _Estimates(stages)
    for key in typical_stay_days:
        if key not in e.index:
            e.unknown_stage(("typical_stay_days", key), key)
    for key in next_stage:
        if key not in e.index:
            e.unknown_stage(("next_stage", key), key)
    rates, leaves, unsettled = _rates_from_stays_and_shares(e, typical_stay_days, next_stage)
    init = _initial_shares(e, initial)
    covariates = tuple(covariates)
    _covariate_name_problems(e, covariates)
    effects = _effects_from_hazard_ratios(e, hazard_ratios, covariates, rates, leaves, unsettled)
    channels = _check_channels(e, checks, covariates, typical_stay_days, leaves)
    _listed_stage_problems(e, follow_up_stages, exact_entry_stages, leaves)
    if e.problems:
        return None, e.problems
    n = e.n
    transitions = tuple(Transition(r, s, float(rates[r, s]), effects.get((r, s), {}))
                        for r in range(n) for s in range(n) if rates[r, s] > 0)
    try:
        model = StageModel(stages=stages, initial=init / init.sum(), transitions=transitions, channels=tuple(channels),
                           covariates=covariates, follow_up_stages=tuple(follow_up_stages),
                           exact_entry_stages=tuple(exact_entry_stages), name=name)
    except ModelError as exc:   # not expected after the checks above; reported the same way
        return None, [Problem((), str(exc))]
    return model, []


def _stage_name_problems(stages: tuple) -> list:
    """At least two stages, each a non-empty text listed once."""
    problem = stage_count_problem(len(stages))
    if problem:
        return [Problem(("stages",), problem)]
    problems = []
    for i, s in enumerate(stages):
        if not isinstance(s, str) or not s.strip():
            problems.append(Problem(("stages", i), f"a stage name must be a non-empty text, got {s!r}"))
        elif s in stages[:i]:
            problems.append(Problem(("stages", i), first_duplicate(stages[:i + 1])[1]))
    return problems


def _rates_from_stays_and_shares(e: _Estimates, typical_stay_days, next_stage) -> tuple:
    """Typical stays and where people go next -> rates (n, n), which stages are left (n,), and the
    stages whose stay or shares have a problem."""
    rates = np.zeros((e.n, e.n))
    leaves = np.zeros(e.n, dtype=bool)
    unsettled = set()
    for r, stage in enumerate(e.stages):
        before = len(e.problems)
        _rates_out(e.problems, r, stage, e.stages, e.index, typical_stay_days, next_stage, rates, leaves)
        if len(e.problems) > before:
            unsettled.add(stage)
    return rates, leaves, unsettled


def _initial_shares(e: _Estimates, initial) -> np.ndarray:
    """The share of cases in each stage at their first contact, shape (n_stages,), adding up to 1."""
    init = np.zeros(e.n)
    initial_ok = True
    for key, value in initial.items():
        if key not in e.index:
            e.unknown_stage(("initial", key), key)
            initial_ok = False
        elif not _is_number(value) or not 0.0 <= value <= 1.0:
            e.problems.append(Problem(("initial", key), f"stage {key!r}: the share of cases in it at their first "
                                      f"contact must be between 0 and 1, got {value!r}"))
            initial_ok = False
        else:
            init[e.index[key]] = value
    if initial_ok and abs(init.sum() - 1.0) > SUM_TOLERANCE:
        e.problems.append(Problem(("initial",), f"the shares of cases in each stage at their first contact add up to "
                                  f"{init.sum():.6g}; expected 1"))
    return init


def _covariate_name_problems(e: _Estimates, covariates: tuple) -> None:
    for i, cov in enumerate(covariates):
        if not isinstance(cov, str) or not cov.strip():
            e.problems.append(Problem(("covariates", i), f"a covariate name must be a non-empty text, got {cov!r}"))
        elif cov in covariates[:i]:
            e.problems.append(Problem(("covariates", i), first_duplicate(covariates[:i + 1])[1]))


def _effects_from_hazard_ratios(e: _Estimates, hazard_ratios, covariates: tuple, rates, leaves, unsettled) -> dict:
    """Hazard ratios -> log hazard ratios by (source, target) index pair, on transitions that exist."""
    effects = {}
    for key, ratios in (hazard_ratios or {}).items():
        source, target = key
        if source not in e.index or target not in e.index:
            e.unknown_stage(("hazard_ratios", key), target if source in e.index else source)
            continue
        if rates[e.index[source], e.index[target]] == 0:
            if source in unsettled:
                continue            # its stay or shares are already reported
            why = (f"no share of moves out of {source!r} goes to {target!r}" if leaves[e.index[source]]
                   else f"{source!r} has no valid typical stay or is never left")
            e.problems.append(Problem(("hazard_ratios", key), f"hazard ratios for {source} -> {target}, but {why}"))
            continue
        for cov, ratio in ratios.items():
            if cov not in covariates:
                e.problems.append(Problem(("hazard_ratios", key, cov), f"{source} -> {target}: unknown covariate "
                                          f"{cov!r} (covariates: {', '.join(covariates) or 'none'})"))
            elif not _is_number(ratio) or ratio <= 0:
                e.problems.append(Problem(("hazard_ratios", key, cov), f"{source} -> {target}: the hazard ratio of "
                                          f"{cov!r} must be a positive number (1 = no effect), got {ratio!r}"))
            else:
                effects.setdefault((e.index[source], e.index[target]), {})[cov] = math.log(ratio)
    return effects


def _check_channels(e: _Estimates, checks, covariates: tuple, typical_stay_days, leaves) -> list:
    """Checks -> observation channels (a probability row per stage; even and fixed where never checked)."""
    channels = []
    names = []
    for c, check in enumerate(checks):
        where = ("checks", c)
        if not isinstance(check.name, str) or not check.name.strip():
            e.problems.append(Problem(where + ("name",), f"a check name must be a non-empty text, got {check.name!r}"))
            continue
        if check.name in names:
            e.problems.append(Problem(where + ("name",), first_duplicate(names + [check.name])[1]))
            continue
        names.append(check.name)
        cats = tuple(check.categories)
        if len(cats) < 2 or len(set(cats)) != len(cats):
            e.problems.append(Problem(where + ("categories",), f"check {check.name!r}: needs at least two different "
                                      f"results, got {list(cats)!r}"))
            continue
        table = np.zeros((e.n, len(cats)))
        fixed = set()
        ok = True
        for key in check.results:
            if key not in e.index:
                e.unknown_stage(where + ("results", key), key)
                ok = False
        for r, stage in enumerate(e.stages):
            if stage not in check.results:
                if leaves[r] or stage not in typical_stay_days:
                    e.problems.append(Problem(where + ("results", stage), f"check {check.name!r}: no results given "
                                              f"for stage {stage!r}"))
                    ok = False
                else:
                    table[r] = 1.0 / len(cats)   # never checked there: even, fixed
                    fixed.add(r)
                continue
            before = len(e.problems)
            _check_row(e.problems, where + ("results", stage), stage, check, check.results[stage])
            if len(e.problems) > before:
                ok = False
            else:
                table[r] = check_probabilities(cats, check.results[stage])
        if ok:
            channels.append(Channel(check.name, cats, table, frozenset(fixed)))
    problem = name_clash_problem(names, covariates, channel_word="check")
    if problem:
        e.problems.append(Problem(("checks",), problem))
    return channels


def _listed_stage_problems(e: _Estimates, follow_up_stages, exact_entry_stages, leaves) -> None:
    """Follow-up and exact-entry stages exist; exact entry only for stages people never leave."""
    for key, listed in (("follow_up_stages", follow_up_stages), ("exact_entry_stages", exact_entry_stages)):
        for i, s in enumerate(listed):
            if s not in e.index:
                e.unknown_stage((key, i), s)
            elif key == "exact_entry_stages" and leaves[e.index[s]]:
                e.problems.append(Problem((key, i), exact_entry_problem(s, True)))


def staff_estimate_problems(*, stages, typical_stay_days, next_stage, initial, checks=(), covariates=(),
                            hazard_ratios=None, follow_up_stages=(), exact_entry_stages=(),
                            name="model from staff estimates") -> list:
    """Every problem with the estimates (empty when they make a model); arguments as
    :func:`model_from_staff_estimates`.

    Returns
    -------
    list of Problem
    """
    return _build(stages, typical_stay_days, next_stage, initial, checks, covariates, hazard_ratios,
                  follow_up_stages, exact_entry_stages, name)[1]


def model_from_staff_estimates(*, stages, typical_stay_days, next_stage, initial, checks=(), covariates=(),
                               hazard_ratios=None, follow_up_stages=(), exact_entry_stages=(),
                               name="model from staff estimates") -> StageModel:
    """Build a :class:`StageModel` from staff estimates (see the module docstring).

    Parameters
    ----------
    stages : sequence of str
    typical_stay_days : dict
        Stage -> mean stay in days (> 0), or None / ``math.inf`` for a stage people never leave.
    next_stage : dict
        Stage -> {other stage: share of moves out of the stage}, shares adding up to 1.
    initial : dict
        Stage -> share of cases in it at their first contact (missing stages 0), adding up to 1.
    checks : sequence of CheckEstimate
    covariates : sequence of str
    hazard_ratios : dict, optional
        ``(from stage, to stage)`` -> {covariate: hazard ratio > 0}.
    follow_up_stages, exact_entry_stages : sequence of str
    name : str

    Returns
    -------
    StageModel
        Mean time in stage r is ``typical_stay_days[r]`` and the probability that the next move goes
        to s is ``next_stage[r][s]`` (covariates at 0), up to rounding.

    Raises
    ------
    StaffEstimateError
        For the first problem found (see :func:`staff_estimate_problems` for all of them).
    """
    model, problems = _build(stages, typical_stay_days, next_stage, initial, checks, covariates, hazard_ratios,
                             follow_up_stages, exact_entry_stages, name)
    if problems:
        raise StaffEstimateError(problems[0])
    return model


def staff_estimates_from_model(model: StageModel) -> dict:
    """The estimates that give ``model`` back (keyword arguments of :func:`model_from_staff_estimates`).

    Mean stays and next-stage shares are at covariates 0; check results are full probability rows.
    Fixed flags are not carried over (a model from estimates is a start for fitting), except that
    rows of stages people never leave that are even and fixed are left out (and so come back even
    and fixed).
    """
    rates = model.baseline_rate_matrix()
    stays, nexts = {}, {}
    for r, stage in enumerate(model.stages):
        out = rates[r].sum()
        if out > 0:
            stays[stage] = float(1.0 / out)   # mean sojourn -1/q_rr (Norris 1997, section 2.6)
            nexts[stage] = {model.stages[s]: float(rates[r, s] / out) for s in np.flatnonzero(rates[r] > 0)}
        else:
            stays[stage] = None
    absorbing = set(model.absorbing_stages)
    checks = []
    for channel in model.channels:
        p = np.asarray(channel.probabilities, dtype=float)
        results = {}
        for r, stage in enumerate(model.stages):
            even = np.allclose(p[r], 1.0 / channel.n_categories, rtol=0, atol=0.02)
            if r in absorbing and r in channel.fixed_stages and even:
                continue
            results[stage] = tuple(float(v) for v in p[r])
        checks.append(CheckEstimate(channel.name, tuple(channel.categories), results))
    hazard = {}
    for t in model.transitions:
        if t.effects and t.rate > 0:
            hazard[(model.stages[t.source], model.stages[t.target])] = {c: math.exp(b) for c, b in t.effects.items()}
    return dict(stages=tuple(model.stages), typical_stay_days=stays, next_stage=nexts,
                initial={s: float(v) for s, v in zip(model.stages, model.initial)}, checks=tuple(checks),
                covariates=tuple(model.covariates), hazard_ratios=hazard,
                follow_up_stages=tuple(model.follow_up_stages), exact_entry_stages=tuple(model.exact_entry_stages),
                name=model.name)
