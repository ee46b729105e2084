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

from hmm.model import Channel, ModelError, StageModel, Transition

from .errors import InputError
from .textfiles import decode_json, read_utf8_text

FORMAT = "caseview.stage-model"
FORMAT_VERSION = 1

_TOP_KEYS = {
    "format", "format_version", "name", "time_unit", "stages", "initial", "initial_fixed",
    "transitions", "channels", "covariates", "follow_up_stages", "exact_entry_stages",
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

    stages = _string_list(p, data, "stages", required=True)
    if len(stages) < 2:
        p.fail("stages", "a model needs at least two stages")
    _no_duplicates(p, "stages", stages)
    index = {s: i for i, s in enumerate(stages)}

    def stage_ref(where: str, value) -> int:
        if not isinstance(value, str) or value not in index:
            p.fail(where, f"unknown stage {value!r} (stages: {', '.join(stages)})")
        return index[value]

    covariates = []
    for i, cov in enumerate(_list(p, data, "covariates")):
        where = f"covariates[{i}]"
        if not isinstance(cov, dict) or not isinstance(cov.get("name"), str) or not cov["name"].strip():
            p.fail(where, 'expected {"name": "...", "kind": "numeric"}')
        if cov.get("kind", "numeric") != "numeric":
            p.fail(f"{where}.kind", f'only "numeric" covariates are supported, got {cov.get("kind")!r}')
        covariates.append(cov["name"])
    _no_duplicates(p, "covariates", covariates)

    initial = data.get("initial")
    if not isinstance(initial, dict):
        p.fail("initial", "expected an object mapping each stage to its probability at the first contact")
    init = np.zeros(len(stages))
    for name, value in initial.items():
        init[stage_ref(f"initial.{name}", name)] = _number(p, f"initial.{name}", value, low=0.0)
    if abs(init.sum() - 1.0) > 1e-6:
        p.fail("initial", f"probabilities must sum to 1 within 1e-6, they sum to {init.sum():.8g}")

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
        if r == s:
            p.fail(where, f"a transition from {stages[r]} to itself is not allowed")
        if (r, s) in seen:
            p.fail(where, f"transition {stages[r]} -> {stages[s]} already given at transitions[{seen[(r, s)]}]")
        seen[(r, s)] = i
        rate = _number(p, f"{where}.rate", t.get("rate"), low=0.0)
        effects = {}
        raw_effects = t.get("effects", {})
        if not isinstance(raw_effects, dict):
            p.fail(f"{where}.effects", "expected an object mapping covariate names to log hazard ratios")
        for cov, beta in raw_effects.items():
            if cov not in covariates:
                p.fail(f"{where}.effects.{cov}", f"unknown covariate (declared: {', '.join(covariates) or 'none'})")
            effects[cov] = _number(p, f"{where}.effects.{cov}", beta)
        fixed_effects = _string_list(p, t, "fixed_effects", prefix=where)
        for cov in fixed_effects:
            if cov not in effects:
                p.fail(f"{where}.fixed_effects", f"{cov!r} has no effect on this transition to keep fixed")
        transitions.append(Transition(r, s, rate, effects, fixed_rate=_bool(p, f"{where}.fixed", t.get("fixed", False)),
                                      fixed_effects=frozenset(fixed_effects)))

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
        probs = c.get("probabilities")
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
            if abs(table[r].sum() - 1.0) > 1e-6:
                p.fail(f"{where}.probabilities.{stage}", f"must sum to 1 within 1e-6, sums to {table[r].sum():.8g}")
        fixed_stages = set()
        if _bool(p, f"{where}.fixed", c.get("fixed", False)):
            fixed_stages = set(range(len(stages)))
        for stage in _string_list(p, c, "fixed_stages", prefix=where):
            fixed_stages.add(stage_ref(f"{where}.fixed_stages", stage))
        channels.append(Channel(c["name"], tuple(cats), table, frozenset(fixed_stages)))
    _no_duplicates(p, "channels", [c.name for c in channels])
    clash = {c.name for c in channels} & set(covariates)
    if clash:
        p.fail("channels", f"name used for both a channel and a covariate: {', '.join(sorted(clash))}")

    follow_up = _string_list(p, data, "follow_up_stages")
    for j, s in enumerate(follow_up):
        stage_ref(f"follow_up_stages[{j}]", s)
    exact = _string_list(p, data, "exact_entry_stages")
    for j, s in enumerate(exact):
        stage_ref(f"exact_entry_stages[{j}]", s)
    _check_model_names(p, stages, channels, covariates)
    try:
        return StageModel(
            stages=tuple(stages), initial=init, transitions=tuple(transitions), channels=tuple(channels),
            covariates=tuple(covariates), follow_up_stages=tuple(follow_up), exact_entry_stages=tuple(exact),
            initial_fixed=_bool(p, "initial_fixed", data.get("initial_fixed", False)),
            name=str(data.get("name", "stage model")),
        )
    except ModelError as exc:
        raise InputError(f"{source}: {exc}") from None


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
    out["covariates"] = [{"name": n, "kind": "numeric"} for n in model.covariates]
    if model.follow_up_stages:
        out["follow_up_stages"] = list(model.follow_up_stages)
    if model.exact_entry_stages:
        out["exact_entry_stages"] = list(model.exact_entry_stages)
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
    seen = set()
    for i, n in enumerate(names):
        if n in seen:
            p.fail(f"{where}[{i}]", f"duplicate name {n!r}")
        seen.add(n)


def _number(p: _Path, where: str, value, low: float | None = None, high: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        p.fail(where, f"expected a finite number, got {value!r}")
    if low is not None and value < low:
        p.fail(where, f"must be >= {low:g}, got {value!r}" + (" (rates are per day and cannot be negative)"
                                                               if where.endswith(".rate") else ""))
    if high is not None and value > high:
        p.fail(where, f"must be <= {high:g}, got {value!r}")
    return float(value)


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
