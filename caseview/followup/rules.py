"""Follow-up rules: which cases to flag, with per-workspace thresholds.

A rule set is stored in the workspace setting ``follow_up_rules`` (JSON) and can be written to
or read from a rule file of this layout::

    {"format": "caseview.follow-up-rules", "format_version": 1,
     "rules": [{"name": "in_follow_up_now", "enabled": true, "threshold": 0.5}, ...]}

Every rule has ``name``, ``enabled`` and ``threshold``; some have one more parameter (listed in
:data:`RULE_PARAMETERS`). A rule missing from a file keeps its default; unknown rules or keys are
errors, so a typo never silently switches a rule off.

The default rules and why their thresholds (all advisory; a service should tune them to its own
capacity, they are starting points, not validated cut-offs):

``in_follow_up_now`` - P(in a follow-up stage on the as-of date) >= 0.50.
    0.50 is the point where a follow-up stage is more likely than not: below it the better single
    guess is "not in follow-up", above it the better guess is "in follow-up" (the equal-cost Bayes
    decision boundary). Its threshold is also the one the next-contact schedule aims at.
``likely_to_reach_follow_up`` - P(in a follow-up stage at some time before the horizon) >= 0.60.
    The reach probability is never below the current probability, so at the 0.50 level this rule
    would mostly repeat the first one; 0.60 asks for a clearly-more-likely-than-not entry within
    the horizon (default 90 days, about the usual longest gap between contacts of 16 weeks less a
    margin) and flags cases that are heading for follow-up although not there yet.
``long_gap_uncertain`` - days since the last contact >= 112 and the most likely stage has
    probability < 0.60.
    112 days = 16 weeks, the longest usual interval between contacts in the service (SCENARIO.md,
    "every 2 to 16 weeks"); with the most likely stage under 0.60 the model cannot say with any
    confidence where the person is, so the only way to know is to get in touch. The same number of
    days is the latest a next contact is ever scheduled after the last one (``assess.ROUTINE_RULE``).
``sharp_rise`` - P(follow-up stage now) minus its value in the most recent saved score run before
    this as-of date >= 0.20.
    Propagation alone cannot move the probability fast: the largest total rate from a
    non-follow-up stage into a follow-up stage in the demo model is 0.0069 per day (Slipping ->
    Struggling 0.0045 x e^0.3 + Slipping -> Crisis 0.0008), and on the demo caseload the largest
    30-day rise of a case with no new contact was 0.08 (measured, 2026-10-31 -> 2026-11-30). A rise
    of 0.20 therefore means new evidence; it fired for 13 of 400 demo cases over that month (3%).
    It only fires when an earlier snapshot exists (``caseview flags --save``).

Measured on the demo caseload as of 2026-11-30 (400 cases): in_follow_up_now 76,
likely_to_reach_follow_up 77 (6 of them not yet in follow-up), long_gap_uncertain 0 (the demo's
active cases are never left more than 16 weeks; the 72 longer gaps are cases that moved to
residential care, whose stage is certain, so the certainty clause correctly spares them).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace
from pathlib import Path

from caseview.errors import InputError
from caseview.textfiles import decode_json

FORMAT = "caseview.follow-up-rules"
FORMAT_VERSION = 1
SETTING_KEY = "follow_up_rules"

#: The rule that sets the next-contact schedule (its threshold is the level aimed at).
SCHEDULE_RULE = "in_follow_up_now"

#: Rule name -> (what the threshold measures, allowed range of the threshold).
RULE_THRESHOLDS = {
    "in_follow_up_now": ("P(follow-up stage now)", (0.0, 1.0)),
    "likely_to_reach_follow_up": ("P(reach a follow-up stage within the horizon)", (0.0, 1.0)),
    "long_gap_uncertain": ("days since last contact", (0.0, 36500.0)),
    "sharp_rise": ("rise in P(follow-up stage now) since the previous saved run", (0.0, 1.0)),
}

#: Extra parameters per rule: name -> {parameter: (meaning, (low, high), default)}.
RULE_PARAMETERS = {
    "long_gap_uncertain": {
        "certainty_below": ("probability of the most likely stage is below", (0.0, 1.0), 0.60),
    },
}

DEFAULT_THRESHOLDS = {
    "in_follow_up_now": 0.50,
    "likely_to_reach_follow_up": 0.60,
    "long_gap_uncertain": 112.0,
    "sharp_rise": 0.20,
}

RULE_NAMES = tuple(DEFAULT_THRESHOLDS)


@dataclass(frozen=True)
class Rule:
    """One rule: its name, whether it is switched on, its threshold and any extra parameters."""

    name: str
    enabled: bool
    threshold: float
    parameters: dict = field(default_factory=dict)

    @property
    def measures(self) -> str:
        return RULE_THRESHOLDS[self.name][0]

    def to_dict(self) -> dict:
        out = {"name": self.name, "enabled": self.enabled, "threshold": self.threshold}
        out.update(self.parameters)
        return out


@dataclass(frozen=True)
class RuleSet:
    """An ordered, validated set of rules (one of each known rule)."""

    rules: tuple

    @property
    def names(self) -> tuple:
        return tuple(r.name for r in self.rules)

    def __getitem__(self, name: str) -> Rule:
        for r in self.rules:
            if r.name == name:
                return r
        raise KeyError(name)

    def __iter__(self):
        return iter(self.rules)

    @property
    def enabled(self) -> tuple:
        return tuple(r for r in self.rules if r.enabled)

    def to_dict(self) -> dict:
        return {"format": FORMAT, "format_version": FORMAT_VERSION, "rules": [r.to_dict() for r in self.rules]}

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=2) + "\n"

    def with_changes(self, assignments) -> "RuleSet":
        """A copy with ``NAME.KEY=VALUE`` assignments applied (KEY: enabled, threshold or a parameter).

        Raises
        ------
        InputError
            Naming the assignment, the rule or key, the value and what was expected.
        """
        data = self.to_dict()
        by_name = {r["name"]: r for r in data["rules"]}
        for text in assignments:
            where = f"rule change {text!r}"
            left, sep, value = str(text).partition("=")
            name, dot, key = left.strip().partition(".")
            if not sep or not dot or not key:
                raise InputError(f"{where}: expected NAME.KEY=VALUE, for example in_follow_up_now.threshold=0.4")
            if name not in by_name:
                raise InputError(f"{where}: unknown rule {name!r} (rules: {', '.join(RULE_NAMES)})")
            allowed = ["enabled", "threshold"] + list(RULE_PARAMETERS.get(name, {}))
            if key not in allowed:
                raise InputError(f"{where}: rule {name} has no setting {key!r} (settings: {', '.join(allowed)})")
            value = value.strip()
            if key == "enabled":
                lowered = value.lower()
                if lowered not in ("true", "false", "yes", "no", "on", "off", "1", "0"):
                    raise InputError(f"{where}: expected true or false, got {value!r}")
                by_name[name][key] = lowered in ("true", "yes", "on", "1")
            else:
                low, high = RULE_THRESHOLDS[name][1] if key == "threshold" else RULE_PARAMETERS[name][key][1]
                try:
                    number = float(value)
                except ValueError:
                    number = math.nan
                if not low <= number <= high:
                    raise InputError(f"{where}: expected a number between {low:g} and {high:g}, got {value!r}")
                by_name[name][key] = number
        return rules_from_dict(data, source="rule changes")


def default_rules() -> RuleSet:
    """The documented default rule set (see the module docstring for the reasons)."""
    return RuleSet(tuple(
        Rule(name, True, DEFAULT_THRESHOLDS[name],
             {key: spec[2] for key, spec in RULE_PARAMETERS.get(name, {}).items()})
        for name in RULE_NAMES))


def _number(source: str, where: str, value, low: float, high: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"{source}: {where}: expected a number between {low:g} and {high:g}, got {value!r}")
    if not low <= value <= high:
        raise InputError(f"{source}: {where}: expected a number between {low:g} and {high:g}, got {value!r}")
    return float(value)


def rules_from_dict(data, source: str = "rules") -> RuleSet:
    """Validate a decoded rule file; rules it leaves out keep their defaults.

    Raises
    ------
    InputError
        With the source, the JSON path (for example ``rules[1].threshold``), the value and what
        was expected.
    """
    if not isinstance(data, dict):
        raise InputError(f"{source}: expected a JSON object with \"format\": \"{FORMAT}\"")
    if data.get("format") != FORMAT:
        raise InputError(f"{source}: format: expected \"{FORMAT}\", got {data.get('format')!r}")
    version = data.get("format_version")
    if version != FORMAT_VERSION:
        newer = isinstance(version, int) and not isinstance(version, bool) and version > FORMAT_VERSION
        hint = "; update caseview" if newer else ""
        raise InputError(f"{source}: format_version: expected {FORMAT_VERSION}, got {version!r}{hint}")
    unknown_top = set(data) - {"format", "format_version", "rules", "note"}
    if unknown_top:
        raise InputError(f"{source}: unknown key(s) {', '.join(sorted(unknown_top))} "
                         f"(expected format, format_version, rules, note)")
    items = data.get("rules")
    if not isinstance(items, list):
        raise InputError(f"{source}: rules: expected a list of rule objects, got {type(items).__name__}")
    defaults = {r.name: r for r in default_rules()}
    chosen = {}
    for i, item in enumerate(items):
        where = f"rules[{i}]"
        if not isinstance(item, dict):
            raise InputError(f"{source}: {where}: expected an object like "
                             f"{{\"name\": \"in_follow_up_now\", \"enabled\": true, \"threshold\": 0.5}}")
        name = item.get("name")
        if name not in defaults:
            raise InputError(f"{source}: {where}.name: unknown rule {name!r} (rules: {', '.join(RULE_NAMES)})")
        if name in chosen:
            raise InputError(f"{source}: {where}.name: rule {name} is given twice")
        params = RULE_PARAMETERS.get(name, {})
        unknown = set(item) - {"name", "enabled", "threshold"} - set(params)
        if unknown:
            allowed = ", ".join(["name", "enabled", "threshold"] + list(params))
            raise InputError(f"{source}: {where}: unknown key(s) {', '.join(sorted(unknown))} for rule {name} "
                             f"(allowed: {allowed})")
        base = defaults[name]
        enabled = item.get("enabled", base.enabled)
        if not isinstance(enabled, bool):
            raise InputError(f"{source}: {where}.enabled: expected true or false, got {enabled!r}")
        low, high = RULE_THRESHOLDS[name][1]
        threshold = _number(source, f"{where}.threshold ({name})", item.get("threshold", base.threshold), low, high)
        values = {}
        for key, (_, (p_low, p_high), _default) in params.items():
            values[key] = _number(source, f"{where}.{key} ({name})", item.get(key, base.parameters[key]),
                                  p_low, p_high)
        chosen[name] = replace(base, enabled=enabled, threshold=threshold, parameters=values)
    return RuleSet(tuple(chosen.get(name, defaults[name]) for name in RULE_NAMES))


def rules_from_json(text: str, source: str = "rules") -> RuleSet:
    data = decode_json(text, source)
    return rules_from_dict(data, source)


def load_rule_file(path) -> RuleSet:
    """Read and validate a rule file (UTF-8 JSON)."""
    path = Path(path)
    from caseview.textfiles import read_utf8_text

    text = read_utf8_text(path, "rule file")
    return rules_from_json(text, source=str(path))


def save_rule_file(rules: RuleSet, path) -> None:
    path = Path(path)
    try:
        path.write_text(rules.to_json(), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{path}: cannot write rule file ({exc.strerror})") from None


def workspace_rules(ws) -> RuleSet:
    """The workspace's rule set (the defaults when none was saved)."""
    stored = ws.get_setting(SETTING_KEY, None)
    if stored is None:
        return default_rules()
    if isinstance(stored, str):
        return rules_from_json(stored, source=f"workspace setting {SETTING_KEY}")
    return rules_from_dict(stored, source=f"workspace setting {SETTING_KEY}")


def save_workspace_rules(ws, rules: RuleSet, actor: str) -> None:
    """Store the rule set in the workspace (``set_setting`` writes the audit entry)."""
    ws.set_setting(SETTING_KEY, rules.to_dict(), actor)


def describe(rules: RuleSet) -> list:
    """Lines of text describing every rule, for ``caseview rules``."""
    lines = []
    for r in rules:
        extra = "".join(f", {RULE_PARAMETERS[r.name][k][0]} {v:g}" for k, v in r.parameters.items())
        state = "on " if r.enabled else "off"
        lines.append(f"{state} {r.name:<26} {r.measures} >= {r.threshold:g}{extra}")
    return lines
