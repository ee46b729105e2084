"""The one naming rule for stages, channels, categories and covariates of a stage model.

Names travel into file headers (a channel or covariate is a column of the timeline file; a stage
becomes ``p_<stage>`` in score files), into ``stage_known`` cells (stages joined with ``|``) and
into spreadsheet cells. So a name must be non-empty text with no spaces at the start or end, no
control or invisible characters (tab, line break, zero-width space, ...), no ``|``, and must not be
one of :data:`RESERVED_NAMES` (the columns the timeline file and the contact listing use for
themselves). :func:`name_problem` is that rule; every model-reading path (model files, stored model
versions, staff-estimate files) calls it through :func:`model_name_problems`.

Names that would become the same column or cell are refused too (:func:`model_name_problems`):
two stages, channels or covariates that differ only in letter case or punctuation (``Stable`` and
``stable``, ``moved on`` and ``moved_on`` give one report column), and two categories of one
channel that differ only in letter case or surrounding spaces (the importer matches categories
that way) or that are the same once a spreadsheet's formula escape is applied (``=x`` and ``'=x``).
"""

from __future__ import annotations

import re
import unicodedata

from .cell_text import neutralise

RESERVED_NAMES = ("case_id", "date", "coordinator", "stage_known", "contact_kind", "advisory", "status",
                  "recorded_at", "recorded_by", "reason")
MAX_NAME_LENGTH = 80


def name_problem(name, what: str = "name") -> str | None:
    """Why ``name`` cannot be a stage, channel, category or covariate name, or None."""
    if not isinstance(name, str) or name == "" or name.isspace():
        return f"expected a non-empty text for the {what}, got {name!r}"
    if name != name.strip():
        return f"the {what} {name.strip()!r} has spaces at the start or end; remove them"
    bad = next((c for c in name if unicodedata.category(c) in ("Cc", "Cf", "Zl", "Zp")), None)
    if bad is not None:
        return (f"the {what} {name.encode('unicode_escape').decode('ascii')!r} contains a control or invisible "
                f"character (U+{ord(bad):04X}); use plain visible text")
    if "|" in name:
        return f"the {what} {name!r} contains '|', which joins several stages in stage_known; choose another character"
    if name.casefold() in RESERVED_NAMES:
        return f"the {what} {name!r} is reserved for a column of its own ({', '.join(RESERVED_NAMES)})"
    if len(name) > MAX_NAME_LENGTH:
        return f"the {what} is {len(name)} characters long (at most {MAX_NAME_LENGTH})"
    return None


def column_key(name: str) -> str:
    """The column a name becomes in reports: ``"Moved to residential care"`` -> ``"moved_to_residential_care"``."""
    return re.sub(r"[^0-9a-z]+", "_", name.lower()).strip("_") or "stage"


def _clashes(names, key) -> tuple | None:
    seen = {}
    for i, name in enumerate(names):
        k = key(name)
        if k in seen and names[seen[k]] != name:
            return seen[k], i
        seen.setdefault(k, i)
    return None


def model_name_problems(stages, channels, covariates) -> list:
    """Every naming problem as ``(JSON path, message)``, in file order.

    Parameters
    ----------
    stages : sequence of str
    channels : sequence of (name, sequence of category names)
    covariates : sequence of str
    """
    out = []
    for i, s in enumerate(stages):
        why = name_problem(s, "stage name")
        if why:
            out.append((f"stages[{i}]", why))
    for i, (name, categories) in enumerate(channels):
        why = name_problem(name, "channel name")
        if why:
            out.append((f"channels[{i}].name", why))
        for j, c in enumerate(categories):
            why = name_problem(c, "category")
            if why:
                out.append((f"channels[{i}].categories[{j}]", why))
    for i, name in enumerate(covariates):
        why = name_problem(name, "covariate name")
        if why:
            out.append((f"covariates[{i}].name", why))
    if out:
        return out
    clash = _clashes(list(stages), column_key)
    if clash:
        a, b = clash
        out.append((f"stages[{b}]", f"{stages[b]!r} and {stages[a]!r} become the same column "
                                    f"({column_key(stages[a])!r}) in reports; make them differ in letters or digits"))
    columns = [name for name, _ in channels] + list(covariates)
    paths = [f"channels[{i}].name" for i in range(len(channels))] + [f"covariates[{i}].name"
                                                                       for i in range(len(covariates))]
    clash = _clashes(columns, lambda n: neutralise(n).casefold())
    if clash:
        a, b = clash
        out.append((paths[b], f"{columns[b]!r} and {columns[a]!r} differ only in letter case or a spreadsheet "
                              "escape, so they would be one column of the timeline file"))
    for i, (name, categories) in enumerate(channels):
        rules = ((lambda c: c.strip().casefold(), "letter case"), (neutralise, "a spreadsheet's formula escape"))
        for key, how in rules:
            clash = _clashes(list(categories), key)
            if clash:
                a, b = clash
                out.append((f"channels[{i}].categories[{b}]", f"{categories[b]!r} and {categories[a]!r} differ only "
                                                              f"in {how}; the import could not tell them apart"))
                break
    return out
