"""Vectorised validation of timeline chunks against the current model.

Each chunk of text cells is checked column by column with pandas/numpy operations (``isin`` for
categories, a regular expression then a real calendar check for dates, ``to_numeric`` for
covariates); text codes are checked once per distinct value, and distinct values go through the
identifier screen (:mod:`caseview.privacy`). Problems are collected (all of them counted, the first
:data:`PROBLEM_CAP` described) so the user sees every kind of mistake in one run.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from .dates import FIRST_DAY, LAST_DAY, date_format_hint, date_format_text, parse_dates  # noqa: F401

PROBLEM_CAP = 50
MAX_CODE_LENGTH = 64
DATE_RANGE_TEXT = "1900-01-01 to 2199-12-31"
FORMULA_START = ("=", "+", "-", "@")
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")

BASE_COLUMNS = ("case_id", "date", "coordinator", "stage_known")


def _privacy():
    from .. import privacy

    return privacy


def shown(value: str, role: str, column: str) -> str:
    """The value as it may appear in a message: masked when it looks like an identifier."""
    text = str(value)
    try:
        finding = _privacy().screen_value(text, role, column)
    except ImportError:  # the screen is part of caseview; without it show nothing of the value
        return "<value hidden>"
    if finding is not None:
        return f"{_privacy().mask(text)} (masked: {finding.description})"
    if len(text) > 60:
        text = text[:57] + "..."
    return repr(text)


def code_problem(value: str, what: str) -> str | None:
    """Why ``value`` is not a valid pseudonymous code, or None."""
    if len(value) > MAX_CODE_LENGTH:
        return f"expected a {what} of at most {MAX_CODE_LENGTH} characters (got {len(value)})"
    if _CONTROL.search(value):
        return f"expected a {what} without control characters (tab, line break, ...)"
    if value.startswith(FORMULA_START):
        return (f"not a valid {what}: it starts with {value[0]!r}, which spreadsheets treat as a formula; "
                "expected a code such as HS-0001")
    return None


@dataclass
class Problems:
    """Collected problems: ``count`` of all, descriptions of the first :data:`PROBLEM_CAP`."""

    source: str
    lines: list = field(default_factory=list)
    count: int = 0

    def add(self, where: str, column: str | None, message: str, line: int = 0) -> None:
        self.count += 1
        if len(self.lines) < PROBLEM_CAP:
            col = f", column {column!r}" if column else ""
            self.lines.append((line, len(self.lines), f"{self.source}: {where}{col}: {message}"))

    @property
    def room(self) -> int:
        return max(0, PROBLEM_CAP - len(self.lines))

    def raise_if_any(self, what: str = "nothing was imported") -> None:
        if not self.count:
            return
        head = (f"{self.source}: {self.count} problem{'s' if self.count != 1 else ''} found; {what}")
        body = [text for _, _, text in sorted(self.lines)]
        if self.count > len(self.lines):
            body.append(f"... and {self.count - len(self.lines)} more")
        raise InputError("\n".join([head] + body))


@dataclass
class Rules:
    """What the current model expects of every row."""

    channels: dict            # name -> tuple of categories
    covariates: tuple
    stages: tuple
    present: tuple            # target column names in the file, in file order
    date_format: str | None = None   # strptime format of the date column (None: YYYY-MM-DD)


@dataclass
class EncodedChunk:
    lines: np.ndarray          # (n,) int64
    case_codes: np.ndarray     # (n,) object
    days: np.ndarray           # (n,) int64
    coordinators: np.ndarray   # (n,) object
    channel_values: np.ndarray # (n, C) int16
    covariates: np.ndarray     # (n, K) float64
    stage_known: np.ndarray    # (n,) object


def _factor(series) -> tuple[np.ndarray, np.ndarray]:
    """Codes (n,) and the distinct values, stripped of surrounding whitespace (missing -> '')."""
    import pandas as pd

    codes, uniques = pd.factorize(series.to_numpy(dtype=object), use_na_sentinel=False)
    stripped = np.array([u.strip() if isinstance(u, str) else "" for u in list(uniques)] + [None],
                        dtype=object)[:-1]
    return codes.astype(np.int64), stripped


def _first_lines(values: np.ndarray, lines: np.ndarray, seen) -> dict:
    """{distinct non-blank value not in ``seen``: line of its first row}."""
    import pandas as pd

    firsts = pd.Series(values, dtype=object).drop_duplicates()
    out = {}
    for position, value in zip(firsts.index.tolist(), firsts.tolist()):
        if value != "" and value not in seen:
            out[value] = int(lines[position])
    return out


class ChunkValidator:
    """Validate and encode chunks; remembers distinct codes already checked and screened."""

    def __init__(self, rules: Rules, problems: Problems, where, case_ids=None):
        from .case_ids import CaseIdBook

        self.rules = rules
        self.problems = problems
        self.where = where
        self.case_ids = case_ids if case_ids is not None else CaseIdBook()
        self.category_reads: dict = {}   # (channel, as written, category) -> rows
        self._checked = {"case_id": {}, "coordinator": {}, "stage_known": {}}
        self._screened_numbers = {k: set() for k in rules.covariates}

    # ------------------------------------------------------------ helpers
    def _report_all(self, lines, bad, column, values, message) -> None:
        idx = np.flatnonzero(bad)
        described = idx[: self.problems.room]
        for i in described.tolist():
            self.problems.add(self.where(int(lines[i])), column, message(values[i]), int(lines[i]))
        self.problems.count += idx.size - described.size

    def _screen(self, values: list, role: str, column: str, first_line: dict) -> set:
        """Distinct values flagged by the identifier screen (reported once each)."""
        if not values:
            return set()
        findings = _privacy().screen_values(values, role, column)
        for value, finding in findings.items():
            self.problems.add(self.where(first_line[value]), column, line=first_line[value], message=
                              f"value {_privacy().mask(value)} {finding.description} "
                              f"(identifier rule {finding.rule}); caseview never stores direct identifiers - "
                              "use a pseudonymous code or leave the value out")
        return set(findings)

    def _codes(self, column: str, values: np.ndarray, lines, required: bool, role: str, what: str,
               refused=False) -> None:
        if required:
            self._report_all(lines, (values == "") & ~refused, column, values,
                             lambda v: f"empty {what}; expected a code such as HS-0001")
        cache = self._checked[column]
        first = _first_lines(values, lines, cache)
        distinct = list(first)
        if distinct:
            flagged = self._screen(distinct, role, column, first)
            for v in distinct:
                why = None if v in flagged else code_problem(v, what)
                cache[v] = "flagged" if v in flagged else (why or "")
                if why is not None:
                    self.problems.add(self.where(first[v]), column, f"value {shown(v, role, column)}: {why}", first[v])

    # ------------------------------------------------------------ main entry
    def validate(self, first_line: int, frame) -> EncodedChunk | None:
        """Check one chunk of text cells; rows are encoded even when problems were found."""
        import pandas as pd

        n = len(frame)
        lines = np.arange(first_line, first_line + n, dtype=np.int64)
        factors = {}
        blank = np.ones(n, dtype=bool)
        for i, name in enumerate(self.rules.present):
            codes, uniques = _factor(frame[i])
            blank &= (uniques == "")[codes] if uniques.size else True
            if name is not None:
                factors[name] = (codes, uniques)
        keep = ~blank
        if not keep.all():
            lines = lines[keep]
            factors = {k: (c[keep], u) for k, (c, u) in factors.items()}
            n = lines.size
        if n == 0:
            return None

        def values(name):
            codes, uniques = factors[name]
            return uniques[codes]

        case_codes, refused = self._case_ids(*factors["case_id"], lines)
        self._codes("case_id", case_codes, lines, True, "case_id", "case ID", refused)
        if "coordinator" in factors:
            coordinators = values("coordinator")
            self._codes("coordinator", coordinators, lines, False, "coordinator", "coordinator code")
        else:
            coordinators = np.full(n, "", dtype=object)

        # dates (per distinct value): shape, then a real calendar date inside the supported range
        codes, uniques = factors["date"]
        valid_u, day_u = parse_dates(uniques, self.rules.date_format)
        expected = date_format_text(self.rules.date_format)
        self._report_all(lines, ~valid_u[codes], "date", uniques[codes], lambda v: (
            f"empty date; expected a date as {expected}" if v == "" else
            f"value {shown(v, 'date', 'date')}: not a calendar date in {DATE_RANGE_TEXT} written as "
            f"{expected}{date_format_hint(v, self.rules.date_format)}"))
        days = day_u[codes]

        channel_names = list(self.rules.channels)
        channel_values = np.full((n, len(channel_names)), -1, dtype=np.int16)
        for j, name in enumerate(channel_names):
            if name not in factors:
                continue
            cats = self.rules.channels[name]
            codes, uniques = factors[name]
            coded_u = self._categories(name, cats, codes, uniques)
            coded = coded_u[codes]
            self._report_all(lines, coded == -2, name, uniques[codes], lambda v, cats=cats, name=name: (
                f"value {shown(v, 'channel', name)}: unknown category; expected one of "
                f"{', '.join(cats)} or blank (not observed); letter case and surrounding spaces are ignored"))
            channel_values[:, j] = np.where(coded == -2, -1, coded)

        covariates = np.zeros((n, len(self.rules.covariates)))
        for k, name in enumerate(self.rules.covariates):
            codes, uniques = factors[name]
            numbers_u = pd.to_numeric(pd.Series(uniques, dtype=object), errors="coerce").to_numpy(dtype=np.float64)
            bad_u = ~np.isfinite(numbers_u)
            self._report_all(lines, bad_u[codes], name, uniques[codes], lambda v, name=name: (
                "blank value; expected a number at every contact (covariates are not carried forward)" if v == ""
                else f"value {shown(v, 'covariate', name)}: expected a finite number, e.g. 0 or 1"))
            fresh = [u for u, b in zip(uniques.tolist(), bad_u.tolist())
                     if not b and u not in self._screened_numbers[name]]
            if fresh:
                first = _first_lines(uniques[codes], lines, self._screened_numbers[name])
                self._screen(fresh, "covariate", name, {u: first[u] for u in fresh})
                self._screened_numbers[name].update(fresh)
            covariates[:, k] = np.where(bad_u, 0.0, numbers_u)[codes]

        stage_known = np.full(n, "", dtype=object)
        if "stage_known" in factors:
            codes, uniques = factors["stage_known"]
            checked = [self._stage_text(u) for u in uniques.tolist()]
            normal_u = np.array([c[0] for c in checked] + [""], dtype=object)[:-1] if checked else uniques
            why = {u: c[1] for u, c in zip(uniques.tolist(), checked)}
            bad_u = np.array([c[1] is not None for c in checked], dtype=bool)
            self._report_all(lines, bad_u[codes], "stage_known", uniques[codes],
                             lambda v: f"value {shown(v, 'stage_known', 'stage_known')}: {why[v]}")
            stage_known = normal_u[codes]

        return EncodedChunk(lines=lines, case_codes=case_codes, days=days, coordinators=coordinators,
                            channel_values=channel_values, covariates=covariates, stage_known=stage_known)

    def _case_ids(self, codes: np.ndarray, uniques: np.ndarray, lines: np.ndarray) -> tuple:
        """Case IDs of the rows as stored (normalised, first-seen spelling) and the rows whose ID was
        refused (shape (n,) each); refusals become problems."""
        refused = np.zeros(uniques.size, dtype=bool)
        if uniques.size == 0:
            return uniques[codes], refused[codes]
        rows = np.bincount(codes, minlength=uniques.size)
        first = np.full(uniques.size, -1, dtype=np.int64)
        first[codes[::-1]] = np.arange(codes.size - 1, -1, -1)
        kept = np.empty(uniques.size, dtype=object)
        for u, raw in enumerate(uniques.tolist()):
            line = int(lines[first[u]]) if first[u] >= 0 else 0
            if raw == "":
                kept[u] = ""
                continue
            value, why = self.case_ids.resolve(raw, int(rows[u]), line)
            if why is not None:
                self.problems.add(self.where(line), "case_id", f"value {shown(raw, 'case_id', 'case_id')}: {why}",
                                  line)
                refused[u] = True
            kept[u] = value
        return kept[codes], refused[codes]

    def _categories(self, name: str, cats: tuple, codes: np.ndarray, uniques: np.ndarray) -> np.ndarray:
        """Category index per distinct text (-1 blank, -2 unknown), matched ignoring letter case."""
        from ..cell_text import neutralise

        index = {c: k for k, c in enumerate(cats)}
        index.update({neutralise(c): k for k, c in enumerate(cats) if neutralise(c) not in index})  # exports
        folded = {c.strip().casefold(): k for k, c in enumerate(cats)}
        index[""] = -1
        coded_u = np.array([index.get(u, folded.get(u.casefold(), -2)) for u in uniques.tolist()], dtype=np.int16)
        respelled = [u for u, k in enumerate(coded_u.tolist()) if k >= 0 and uniques[u] != cats[k]]
        if respelled:
            rows = np.bincount(codes, minlength=uniques.size)
            for u in respelled:
                key = (name, uniques[u], cats[coded_u[u]])
                self.category_reads[key] = self.category_reads.get(key, 0) + int(rows[u])
        return coded_u

    def category_notes(self, label: str) -> list:
        """``read 'Slow' as 'slow' 12 times`` lines for the import summary, one per channel."""
        by_channel: dict = {}
        for (name, written, category), n in self.category_reads.items():
            times = f"{n:,} time{'s' if n != 1 else ''}"
            by_channel.setdefault(name, []).append(f"read {written!r} as {category!r} {times}")
        return [f"{label}: column {name!r}: {'; '.join(parts)}" for name, parts in by_channel.items()]

    def _stage_text(self, value: str) -> tuple[str, str | None]:
        if value == "":
            return "", None
        from ..cell_text import neutralise

        if value.startswith("'") and neutralise(value[1:]) == value:   # caseview's own export
            value = value[1:]
        names = [part.strip() for part in value.split("|")]
        unknown = [p for p in names if p not in self.rules.stages]
        if unknown or not names:
            part = f" {shown(unknown[0], 'stage_known', 'stage_known')}" if unknown[0] != value else ""
            return "", (f"unknown stage{part}; expected a stage ({', '.join(self.rules.stages)}) "
                        "or several joined with '|', or blank")
        chosen = set(names)
        return "|".join(s for s in self.rules.stages if s in chosen), None
