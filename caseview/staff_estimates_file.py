"""Read and write staff-estimate files (JSON, format ``caseview.staff-estimates`` version 1).

A staff-estimate file says, in plain numbers, what experienced staff expect: how long people
typically stay in each stage, where they usually go next, how often each check result is wrong,
and so on. :func:`load_staff_estimates` turns it into the keyword arguments of
:func:`hmm.fitting.staff_estimates.model_from_staff_estimates`; :func:`model_from_estimates_file`
goes straight to a :class:`~hmm.StageModel`. The layout is documented in README.md ("Starting from
staff estimates"); ``resources/models/home_support_staff_estimates.json`` is an example.

Every problem is reported as :class:`caseview.errors.InputError` naming the file and the JSON
path of the offending value (for example ``next_stage.Slipping``), as in :mod:`caseview.modelfile`
(whose helpers this module uses).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

# The staff-estimate functions the window's dialog uses come through here too (the faces never import hmm).
from hmm.fitting.staff_estimates import (CheckEstimate, UsualResult, check_probabilities, model_from_staff_estimates,
                                         staff_estimate_problems, staff_estimates_from_model)
from hmm.model import StageModel

from .modelfile import _check_format, _list, _no_duplicates, _number, _Path, _string_list
from .textfiles import decode_json, read_utf8_text

FORMAT = "caseview.staff-estimates"
FORMAT_VERSION = 1
#: The word used in files (and the window) for a stage people never leave.
NEVER_LEAVES = "never leaves"

_TOP_KEYS = {"format", "format_version", "name", "note", "stages", "typical_stay_days", "next_stage", "initial",
             "checks", "covariates", "hazard_ratios", "follow_up_stages", "exact_entry_stages"}


def load_staff_estimates(path) -> dict:
    """Read and validate a staff-estimate file; the keyword arguments for ``model_from_staff_estimates``."""
    path = Path(path)
    return parse_staff_estimates(read_utf8_text(path, "staff-estimate file"), source=str(path))


def parse_staff_estimates(text: str, source: str = "staff estimates") -> dict:
    """Parse staff-estimate JSON text; ``source`` names it in messages."""
    data = decode_json(text, source)
    return estimates_from_dict(data, source)


def model_from_estimates_file(path) -> StageModel:
    """The stage model a staff-estimate file describes (validated)."""
    return model_from_staff_estimates(**load_staff_estimates(path))


def estimates_from_dict(data: Any, source: str = "staff estimates") -> dict:
    """Validate the decoded JSON object; return the keyword arguments for ``model_from_staff_estimates``."""
    p = _Path(source)
    _check_format(p, data, FORMAT, FORMAT_VERSION)
    unknown = set(data) - _TOP_KEYS
    if unknown:
        p.fail(sorted(unknown)[0], f"unknown key (expected one of: {', '.join(sorted(_TOP_KEYS))})")
    name = data.get("name", "model from staff estimates")
    if not isinstance(name, str):
        p.fail("name", f"expected a text, got {name!r}")

    stages = _string_list(p, data, "stages", required=True)
    _no_duplicates(p, "stages", stages)
    from .model_names import model_name_problems

    for where, message in model_name_problems(stages, [], [])[:1]:
        p.fail(where, message)

    stays = {}
    for stage, value in _object(p, data, "typical_stay_days", "each stage's typical stay in days").items():
        where = f"typical_stay_days.{stage}"
        if value is None or value == NEVER_LEAVES:
            stays[stage] = None
        elif isinstance(value, str):
            p.fail(where, f'expected a number of days or "{NEVER_LEAVES}", got {value!r}')
        else:
            stays[stage] = _number(p, where, value)

    next_stage = {}
    for stage, shares in _object(p, data, "next_stage", "each stage's shares of where people go next").items():
        where = f"next_stage.{stage}"
        if not isinstance(shares, dict):
            p.fail(where, 'expected an object of shares, e.g. {"Stable": 0.4, "Struggling": 0.6}')
        next_stage[stage] = {target: _number(p, f"{where}.{target}", v) for target, v in shares.items()}

    initial = {stage: _number(p, f"initial.{stage}", v)
               for stage, v in _object(p, data, "initial", "each stage's share at the first contact").items()}

    checks = []
    for c, item in enumerate(_list(p, data, "checks")):
        where = f"checks[{c}]"
        if not isinstance(item, dict) or not isinstance(item.get("name"), str):
            p.fail(where, 'expected {"name": ..., "categories": [...], "results": {...}}')
        extra = set(item) - {"name", "categories", "results"}
        if extra:
            p.fail(f"{where}.{sorted(extra)[0]}", "unknown key (expected name, categories, results)")
        categories = _string_list(p, item, "categories", required=True, prefix=where)
        _no_duplicates(p, f"{where}.categories", categories)
        results = {}
        for stage, row in _object(p, item, "results", "each stage's results", prefix=where).items():
            at = f"{where}.results.{stage}"
            if isinstance(row, list):
                results[stage] = tuple(_number(p, f"{at}[{j}]", v) for j, v in enumerate(row))
            elif isinstance(row, dict) and set(row) == {"usual", "wrong"}:
                if not isinstance(row["usual"], str):
                    p.fail(f"{at}.usual", f"expected one of {', '.join(categories)}, got {row['usual']!r}")
                results[stage] = UsualResult(row["usual"], _number(p, f"{at}.wrong", row["wrong"]))
            else:
                p.fail(at, f'expected a list of {len(categories)} probabilities or {{"usual": "<result>", '
                           f'"wrong": <share>}}, got {row!r}')
        checks.append(CheckEstimate(item["name"], tuple(categories), results))

    covariates = _string_list(p, data, "covariates")
    hazard_ratios, hazard_index = {}, {}
    for i, item in enumerate(_list(p, data, "hazard_ratios")):
        where = f"hazard_ratios[{i}]"
        if (not isinstance(item, dict) or set(item) != {"from", "to", "ratios"}
                or not all(isinstance(item[k], str) for k in ("from", "to"))):
            p.fail(where, 'expected {"from": "<stage>", "to": "<stage>", "ratios": {"<covariate>": <ratio>}}')
        key = (item["from"], item["to"])
        if key in hazard_index:
            p.fail(where, f"{key[0]} -> {key[1]} already given at hazard_ratios[{hazard_index[key]}]")
        ratios = _object(p, item, "ratios", "covariate names and hazard ratios", prefix=where)
        hazard_ratios[key] = {cov: _number(p, f"{where}.ratios.{cov}", v) for cov, v in ratios.items()}
        hazard_index[key] = i

    estimates = dict(stages=tuple(stages), typical_stay_days=stays, next_stage=next_stage, initial=initial,
                     checks=tuple(checks), covariates=tuple(covariates), hazard_ratios=hazard_ratios,
                     follow_up_stages=tuple(_string_list(p, data, "follow_up_stages")),
                     exact_entry_stages=tuple(_string_list(p, data, "exact_entry_stages")), name=name)
    problems = staff_estimate_problems(**estimates)
    if problems:
        p.fail(json_path(problems[0].path, hazard_index), problems[0].message)
    return estimates


def json_path(path: tuple, hazard_index: dict | None = None) -> str:
    """The JSON path in a staff-estimate file of a problem's ``path`` (``("checks", 0, "results", "Stable")``
    -> ``checks[0].results.Stable``)."""
    out = ""
    for i, key in enumerate(path):
        if isinstance(key, tuple):      # a (from, to) key of hazard_ratios
            out += f"[{(hazard_index or {}).get(key, '?')}]" + (".ratios" if i + 1 < len(path) else "")
        elif isinstance(key, int):
            out += f"[{key}]"
        else:
            out += f".{key}" if out else str(key)
    return out


def estimates_to_dict(estimates: dict) -> dict:
    """The JSON object for staff estimates (keyword-argument form; round-trips through
    :func:`estimates_from_dict`)."""
    def row(result):
        if isinstance(result, UsualResult):
            return {"usual": result.category, "wrong": float(result.wrong_share)}
        return [float(v) for v in result]

    return {
        "format": FORMAT, "format_version": FORMAT_VERSION, "name": estimates.get("name", "model from staff estimates"),
        "stages": list(estimates["stages"]),
        "typical_stay_days": {s: (NEVER_LEAVES if v is None else float(v))
                              for s, v in estimates["typical_stay_days"].items()},
        "next_stage": {s: {t: float(v) for t, v in shares.items()} for s, shares in estimates["next_stage"].items()},
        "initial": {s: float(v) for s, v in estimates["initial"].items()},
        "checks": [{"name": c.name, "categories": list(c.categories),
                    "results": {s: row(r) for s, r in c.results.items()}} for c in estimates.get("checks", ())],
        "covariates": list(estimates.get("covariates", ())),
        "hazard_ratios": [{"from": a, "to": b, "ratios": {c: float(v) for c, v in ratios.items()}}
                          for (a, b), ratios in (estimates.get("hazard_ratios") or {}).items()],
        "follow_up_stages": list(estimates.get("follow_up_stages", ())),
        "exact_entry_stages": list(estimates.get("exact_entry_stages", ())),
    }


def dump_staff_estimates(estimates: dict) -> str:
    """Staff-estimate JSON text, indented for people to read."""
    return json.dumps(estimates_to_dict(estimates), indent=2, ensure_ascii=False) + "\n"


def _object(p: _Path, data: dict, key: str, what: str, prefix: str = "") -> dict:
    where = f"{prefix}.{key}" if prefix else key
    value = data.get(key, {})
    if not isinstance(value, dict):
        p.fail(where, f"expected an object with {what}")
    return value
