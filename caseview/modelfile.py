"""Read and write stage-model files (JSON, format ``caseview.stage-model`` version 1).

The file layout and the syntax for fixed values are documented in README.md ("The model file").
Every problem is reported as :class:`caseview.errors.InputError` naming the file and the JSON
path of the offending value (for example ``transitions[2].rate``).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from hmm.model import UNDECLARED_RANGE, Channel, ModelError, StageModel, Transition, UnscheduledContacts, rate_limit_problem
from hmm.model_rules import (first_duplicate, name_clash_problem, self_transition_problem, stage_count_problem,
                             sum_to_one_problem)

from .errors import InputError
from .textfiles import decode_json, read_utf8_text

FORMAT = "caseview.stage-model"
FORMAT_VERSION = 1

_TOP_KEYS = {
    "format", "format_version", "name", "time_unit", "stages", "initial", "initial_fixed",
    "transitions", "channels", "covariates", "follow_up_stages", "exact_entry_stages",
    "unscheduled_contacts",
}


def load_model(path) -> StageModel:
    """Load and validate a model file."""
    path = Path(path)
    text = read_utf8_text(path, "model file")
    return parse_model(text, source=str(path))


def parse_model(text: str, source: str = "model") -> StageModel:
    """Parse model JSON text; ``source`` names it in messages."""
    data = decode_json(text, source)
    return model_from_dict(data, source)


def _check_format(p, data: Any, name: str, version: int) -> None:
    """The decoded file is a JSON object whose ``format`` is ``name`` and ``format_version`` ``version``."""
    if not isinstance(data, dict):
        p.fail("", "expected a JSON object at the top level")
    if data.get("format") != name:
        p.fail("format", f'expected "{name}", got {data.get("format")!r}')
    found = data.get("format_version")
    if found != version:
        if isinstance(found, int) and not isinstance(found, bool) and found > version:
            p.fail("format_version", f"version {found} is newer than this caseview understands "
                                     f"({version}); update caseview")
        p.fail("format_version", f"expected {version}, got {found!r}")


def model_from_dict(data: Any, source: str = "model") -> StageModel:
    """Build a :class:`StageModel` from the decoded JSON object, validating every value."""
    p = _Path(source)
    _check_format(p, data, FORMAT, FORMAT_VERSION)
    unit = data.get("time_unit", "day")
    if unit != "day":
        p.fail("time_unit", f'only "day" is supported, got {unit!r}')
    stages = _stages(p, data)
    stage_ref = _StageReference(p, stages)
    covariates, ranges = _covariates(p, data)
    initial = _initial(p, data, stages, stage_ref)
    transitions = _transitions(p, data, stages, stage_ref, covariates, ranges)
    channels = _channels(p, data, stages, stage_ref, covariates)
    follow_up = _stage_list(p, data, "follow_up_stages", stage_ref)
    exact = _stage_list(p, data, "exact_entry_stages", stage_ref)
    _check_model_names(p, stages, channels, covariates)
    unscheduled = _unscheduled_contacts_from_dict(p, data, stages, covariates)
    try:
        return StageModel(
            stages=tuple(stages), initial=initial, transitions=tuple(transitions), channels=tuple(channels),
            covariates=tuple(covariates), follow_up_stages=tuple(follow_up), exact_entry_stages=tuple(exact),
            initial_fixed=_bool(p, "initial_fixed", data.get("initial_fixed", False)),
            name=str(data.get("name", "stage model")), unscheduled_contacts=unscheduled,
            covariate_ranges=tuple(ranges.get(c) for c in covariates) if ranges else (),
        )
    except ModelError as exc:
        raise InputError(f"{source}: {exc}") from None


class _StageReference:
    """Stage name at a JSON path -> its index, or fail naming the path and the known stages."""

    def __init__(self, p: _Path, stages: list):
        self.p, self.stages = p, stages
        self.index = {s: i for i, s in enumerate(stages)}

    def __call__(self, where: str, value) -> int:
        if not isinstance(value, str) or value not in self.index:
            self.p.fail(where, f"unknown stage {value!r} (stages: {', '.join(self.stages)})")
        return self.index[value]


def _stages(p: _Path, data: dict) -> list:
    """``stages``: at least two distinct names."""
    stages = _string_list(p, data, "stages", required=True)
    problem = stage_count_problem(len(stages))
    if problem:
        p.fail("stages", problem)
    _no_duplicates(p, "stages", stages)
    return stages


def _covariates(p: _Path, data: dict) -> tuple:
    """``covariates``: names (model order) and the declared ranges by name."""
    covariates, ranges = [], {}
    for i, cov in enumerate(_list(p, data, "covariates")):
        where = f"covariates[{i}]"
        if not isinstance(cov, dict) or not isinstance(cov.get("name"), str) or not cov["name"].strip():
            p.fail(where, 'expected {"name": "...", "kind": "numeric"}')
        if cov.get("kind", "numeric") != "numeric":
            p.fail(f"{where}.kind", f'only "numeric" covariates are supported, got {cov.get("kind")!r}')
        covariates.append(cov["name"])
        if "range" in cov:
            ranges[cov["name"]] = _range(p, f"{where}.range", cov["range"])
    _no_duplicates(p, "covariates", covariates)
    return covariates, ranges


def _initial(p: _Path, data: dict, stages: list, stage_ref: _StageReference) -> np.ndarray:
    """``initial``: probability of each stage at the first contact, shape (n_stages,), summing to 1."""
    initial = data.get("initial")
    if not isinstance(initial, dict):
        p.fail("initial", "expected an object mapping each stage to its probability at the first contact")
    init = np.zeros(len(stages))
    for name, value in initial.items():
        init[stage_ref(f"initial.{name}", name)] = _number(p, f"initial.{name}", value, low=0.0)
    problem = sum_to_one_problem(init)
    if problem:
        p.fail("initial", problem)
    return init


def _transitions(p: _Path, data: dict, stages: list, stage_ref: _StageReference, covariates: list,
                 ranges: dict) -> list:
    """``transitions``: one :class:`Transition` each, rates within the limit over the covariate ranges."""
    transitions = []
    seen = {}
    for i, t in enumerate(_list(p, data, "transitions", required=True)):
        where = f"transitions[{i}]"
        if not isinstance(t, dict):
            p.fail(where, 'expected {"from": ..., "to": ..., "rate": ...}')
        unknown = set(t) - {"from", "to", "rate", "effects", "fixed", "fixed_effects"}
        if unknown:
            p.fail(where, f"unknown key(s) {', '.join(sorted(unknown))}")
        r, s = stage_ref(f"{where}.from", t.get("from")), stage_ref(f"{where}.to", t.get("to"))
        problem = self_transition_problem(stages[r], stages[s])
        if problem:
            p.fail(where, problem)
        if (r, s) in seen:
            p.fail(where, f"transition {stages[r]} -> {stages[s]} already given at transitions[{seen[(r, s)]}]")
        seen[(r, s)] = i
        rate = _number(p, f"{where}.rate", t.get("rate"), low=0.0)
        effects = _effects(p, where, t, covariates)
        problem = rate_limit_problem(rate, effects, ranges)
        if problem:  # name the value to correct: the rate itself, or the effect that can push it furthest
            reach = {c: abs(b) * max(map(abs, ranges.get(c) or UNDECLARED_RANGE)) for c, b in effects.items()}
            worst = max(reach, key=reach.get, default=None)
            blame = f"{where}.rate" if rate_limit_problem(rate, {}, ranges) or not reach.get(worst) \
                else f"{where}.effects.{worst}"
            p.fail(blame, f"{stages[r]} -> {stages[s]}: {problem}")
        fixed_effects = _string_list(p, t, "fixed_effects", prefix=where)
        for cov in fixed_effects:
            if cov not in effects:
                p.fail(f"{where}.fixed_effects", f"{cov!r} has no effect on this transition to keep fixed")
        transitions.append(Transition(r, s, rate, effects, fixed_rate=_bool(p, f"{where}.fixed", t.get("fixed", False)),
                                      fixed_effects=frozenset(fixed_effects)))
    return transitions


def _effects(p: _Path, where: str, transition: dict, covariates: list) -> dict:
    """A transition's ``effects``: covariate name -> log hazard ratio."""
    effects = {}
    raw_effects = transition.get("effects", {})
    if not isinstance(raw_effects, dict):
        p.fail(f"{where}.effects", "expected an object mapping covariate names to log hazard ratios")
    for cov, beta in raw_effects.items():
        if cov not in covariates:
            p.fail(f"{where}.effects.{cov}", f"unknown covariate (declared: {', '.join(covariates) or 'none'})")
        effects[cov] = _number(p, f"{where}.effects.{cov}", beta)
    return effects


def _channels(p: _Path, data: dict, stages: list, stage_ref: _StageReference, covariates: list) -> list:
    """``channels``: one :class:`Channel` (observation channel) each, a probability row per stage."""
    channels = []
    for i, c in enumerate(_list(p, data, "channels")):
        where = f"channels[{i}]"
        if not isinstance(c, dict) or not isinstance(c.get("name"), str) or not c["name"].strip():
            p.fail(where, 'expected {"name": ..., "kind": "categorical", "categories": [...], "probabilities": {...}}')
        if c.get("kind", "categorical") != "categorical":
            p.fail(f"{where}.kind", f'only "categorical" channels are supported, got {c.get("kind")!r}')
        cats = _string_list(p, c, "categories", prefix=where, required=True)
        if len(cats) < 2:
            p.fail(f"{where}.categories", "a channel needs at least two categories")
        _no_duplicates(p, f"{where}.categories", cats)
        table = _probability_table(p, where, c.get("probabilities"), stages, cats, stage_ref)
        fixed_stages = set()
        if _bool(p, f"{where}.fixed", c.get("fixed", False)):
            fixed_stages = set(range(len(stages)))
        for stage in _string_list(p, c, "fixed_stages", prefix=where):
            fixed_stages.add(stage_ref(f"{where}.fixed_stages", stage))
        channels.append(Channel(c["name"], tuple(cats), table, frozenset(fixed_stages)))
    _no_duplicates(p, "channels", [c.name for c in channels])
    problem = name_clash_problem([c.name for c in channels], covariates)
    if problem:
        p.fail("channels", problem)
    return channels


def _probability_table(p: _Path, where: str, probs, stages: list, cats: list,
                       stage_ref: _StageReference) -> np.ndarray:
    """A channel's ``probabilities``: shape (n_stages, n_categories), each row summing to 1."""
    if not isinstance(probs, dict):
        p.fail(f"{where}.probabilities", "expected an object with one list of probabilities per stage")
    table = np.zeros((len(stages), len(cats)))
    for stage in stages:
        if stage not in probs:
            p.fail(f"{where}.probabilities", f"missing the row for stage {stage!r}")
    for stage, row in probs.items():
        r = stage_ref(f"{where}.probabilities.{stage}", stage)
        if not isinstance(row, list) or len(row) != len(cats):
            p.fail(f"{where}.probabilities.{stage}", f"expected a list of {len(cats)} probabilities "
                                                     f"(one per category: {', '.join(cats)})")
        table[r] = [_number(p, f"{where}.probabilities.{stage}[{j}]", v, low=0.0, high=1.0)
                    for j, v in enumerate(row)]
        problem = sum_to_one_problem(table[r])
        if problem:
            p.fail(f"{where}.probabilities.{stage}", problem)
    return table


def _stage_list(p: _Path, data: dict, key: str, stage_ref: _StageReference) -> list:
    """``follow_up_stages`` / ``exact_entry_stages``: names of stages the model has."""
    names = _string_list(p, data, key)
    for j, s in enumerate(names):
        stage_ref(f"{key}[{j}]", s)
    return names


def model_to_dict(model: StageModel, extra: dict | None = None) -> dict:
    """The JSON object for ``model`` (round-trips through :func:`model_from_dict`)."""
    out = {
        "format": FORMAT, "format_version": FORMAT_VERSION, "name": model.name, "time_unit": "day",
        "stages": list(model.stages),
        "initial": {s: float(v) for s, v in zip(model.stages, model.initial)},
    }
    if model.initial_fixed:
        out["initial_fixed"] = True
    out["transitions"] = []
    for t in model.transitions:
        item = {"from": model.stages[t.source], "to": model.stages[t.target], "rate": float(t.rate)}
        if t.effects:
            item["effects"] = {k: float(v) for k, v in t.effects.items()}
        if t.fixed_rate:
            item["fixed"] = True
        if t.fixed_effects:
            item["fixed_effects"] = sorted(t.fixed_effects)
        out["transitions"].append(item)
    out["channels"] = []
    for c in model.channels:
        item = {"name": c.name, "kind": "categorical", "categories": list(c.categories),
                "probabilities": {s: [float(v) for v in row] for s, row in zip(model.stages, c.probabilities)}}
        if c.fixed_stages:
            item["fixed_stages"] = [model.stages[r] for r in sorted(c.fixed_stages)]
        out["channels"].append(item)
    ranges = model.range_of
    out["covariates"] = [{"name": n, "kind": "numeric", **({"range": list(ranges[n])} if n in ranges else {})}
                         for n in model.covariates]
    if model.follow_up_stages:
        out["follow_up_stages"] = list(model.follow_up_stages)
    if model.exact_entry_stages:
        out["exact_entry_stages"] = list(model.exact_entry_stages)
    if model.unscheduled_contacts is not None:
        out["unscheduled_contacts"] = _unscheduled_contacts_to_dict(model)
    if extra:
        out.update({k: v for k, v in extra.items() if k not in out})
    return out


def dump_model(model: StageModel, extra: dict | None = None) -> str:
    """Model JSON text, UTF-8 safe, indented for people to read and diff."""
    return json.dumps(model_to_dict(model, extra), indent=2, ensure_ascii=False) + "\n"


def save_model(model: StageModel, path, extra: dict | None = None) -> None:
    """Write the model file completely or not at all (InputError naming the file on failure)."""
    from .private_files import private_text

    text = dump_model(model, extra)
    with private_text(path, newline="\n") as handle:
        handle.write(text)


# ---------------------------------------------------------------- the unscheduled_contacts block
_UNSCHEDULED_KEYS = {"rates", "effects", "fixed", "fixed_effects", "same_in_every_stage"}


def _unscheduled_contacts_from_dict(p, data: dict, stages: list, covariates: list) -> UnscheduledContacts | None:
    """The optional ``unscheduled_contacts`` block (README, "Timing of unscheduled contacts"), or None.

    ``{"rates": {"<stage>": per-day rate, ...}, "effects": {"<covariate>": log rate ratio, ...},
    "fixed": false, "fixed_effects": [...], "same_in_every_stage": false}``; every stage needs a rate
    (0 = no unscheduled contacts in that stage).
    """
    if "unscheduled_contacts" not in data:
        return None
    where = "unscheduled_contacts"
    block = data[where]
    if not isinstance(block, dict):
        p.fail(where, 'expected {"rates": {"<stage>": rate per day, ...}, "effects": {...}}')
    unknown = set(block) - _UNSCHEDULED_KEYS
    if unknown:
        p.fail(where, f"unknown key(s) {', '.join(sorted(unknown))} (expected: {', '.join(sorted(_UNSCHEDULED_KEYS))})")
    raw_rates = block.get("rates")
    if not isinstance(raw_rates, dict):
        p.fail(f"{where}.rates", "expected an object mapping each stage to its unscheduled contacts per day")
    rates = np.zeros(len(stages))
    for name, value in raw_rates.items():
        if name not in stages:
            p.fail(f"{where}.rates.{name}", f"unknown stage {name!r} (stages: {', '.join(stages)})")
        rates[stages.index(name)] = _number(p, f"{where}.rates.{name}", value, low=0.0)
    for name in stages:
        if name not in raw_rates:
            p.fail(f"{where}.rates", f"missing the rate for stage {name!r} (give 0 if it has no unscheduled contacts)")
    if not np.any(rates > 0):
        p.fail(f"{where}.rates", "at least one stage needs a rate above 0")
    raw_effects = block.get("effects", {})
    if not isinstance(raw_effects, dict):
        p.fail(f"{where}.effects", "expected an object mapping covariate names to log rate ratios")
    effects = {}
    for cov, value in raw_effects.items():
        if cov not in covariates:
            p.fail(f"{where}.effects.{cov}", f"unknown covariate (declared: {', '.join(covariates) or 'none'})")
        effects[cov] = _number(p, f"{where}.effects.{cov}", value)
    fixed_effects = _string_list(p, block, "fixed_effects", prefix=where)
    for cov in fixed_effects:
        if cov not in effects:
            p.fail(f"{where}.fixed_effects", f"{cov!r} has no effect on unscheduled contacts to keep fixed")
    same = _bool(p, f"{where}.same_in_every_stage", block.get("same_in_every_stage", False))
    if same and np.ptp(rates[rates > 0]) > 1e-12 * rates.max():
        p.fail(f"{where}.rates", "with same_in_every_stage every non-zero rate must be the same")
    return UnscheduledContacts(rates, effects, fixed=_bool(p, f"{where}.fixed", block.get("fixed", False)),
                               fixed_effects=frozenset(fixed_effects), same_in_every_stage=same)


def _unscheduled_contacts_to_dict(model: StageModel) -> dict:
    block = model.unscheduled_contacts
    out = {"rates": {s: float(v) for s, v in zip(model.stages, block.rates)}}
    if block.effects:
        out["effects"] = {k: float(v) for k, v in block.effects.items()}
    if block.fixed:
        out["fixed"] = True
    if block.fixed_effects:
        out["fixed_effects"] = sorted(block.fixed_effects)
    if block.same_in_every_stage:
        out["same_in_every_stage"] = True
    return out


# ---------------------------------------------------------------- helpers
class _Path:
    def __init__(self, source: str):
        self.source = source

    def fail(self, where: str, message: str):
        raise InputError(f"{self.source}: {where + ': ' if where else ''}{message}")


def _list(p: _Path, data: dict, key: str, required: bool = False, prefix: str = "") -> list:
    where = f"{prefix}.{key}" if prefix else key
    if key not in data:
        if required:
            p.fail(where, "is required")
        return []
    value = data[key]
    if not isinstance(value, list):
        p.fail(where, "expected a list")
    return value


def _string_list(p: _Path, data: dict, key: str, required: bool = False, prefix: str = "") -> list:
    items = _list(p, data, key, required, prefix)
    where = f"{prefix}.{key}" if prefix else key
    for i, item in enumerate(items):
        if not isinstance(item, str) or not item.strip():
            p.fail(f"{where}[{i}]", f"expected a non-empty text, got {item!r}")
    return list(items)


def _no_duplicates(p: _Path, where: str, names: list) -> None:
    duplicate = first_duplicate(names)
    if duplicate:
        p.fail(f"{where}[{duplicate[0]}]", duplicate[1])


def _number(p: _Path, where: str, value, low: float | None = None, high: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        p.fail(where, f"expected a finite number, got {value!r}")
    if low is not None and value < low:
        p.fail(where, f"must be >= {low:g}, got {value!r}" + (" (rates are per day and cannot be negative)"
                                                               if where.endswith(".rate") else ""))
    if high is not None and value > high:
        p.fail(where, f"must be <= {high:g}, got {value!r}")
    return float(value)


def _range(p: _Path, where: str, value) -> tuple:
    """A covariate's declared ``[low, high]`` (finite numbers, low <= high)."""
    if not isinstance(value, list) or len(value) != 2:
        p.fail(where, f"expected [low, high], two numbers, got {value!r}")
    low, high = (_number(p, f"{where}[{j}]", v) for j, v in enumerate(value))
    if low > high:
        p.fail(where, f"low must not be above high, got [{low:g}, {high:g}]")
    return (low, high)


def _check_model_names(p: _Path, stages: list, channels: list, covariates: list) -> None:
    """The one naming rule (:mod:`caseview.model_names`); the first problem names its JSON path."""
    from .model_names import model_name_problems

    problems = model_name_problems(stages, [(c.name, c.categories) for c in channels], covariates)
    if problems:
        p.fail(*problems[0])


def _bool(p: _Path, where: str, value) -> bool:
    if not isinstance(value, bool):
        p.fail(where, f"expected true or false, got {value!r}")
    return value
