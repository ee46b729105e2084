"""The benchmark table: one row per measure, rendered as markdown."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class Row:
    """One measured figure.

    ``limit`` is a time target in seconds, ``ratio_limit`` a target on caseview / reference.
    Memory must stay within ``memory_limit_mb`` (None: the table's memory target) for the row to pass.
    ``figure`` replaces the time column for rows whose figure is not a time (a ratio, a log-likelihood).
    """

    measure: str
    seconds: float | None
    reference_seconds: float | None
    target: str
    peak_mb: float | None
    reference_peak_mb: float | None = None
    limit: float | None = None
    ratio_limit: float | None = None
    memory_limit_mb: float | None = None
    cpu_seconds: float | None = None
    reference_cpu_seconds: float | None = None
    figure: str | None = None
    verdict: bool | None = None   # for rows with a ``figure``: the pass/fail worked out by the caller

    @property
    def cpu_ratio(self) -> float | None:
        if not self.cpu_seconds or not self.reference_cpu_seconds:
            return None
        return self.cpu_seconds / self.reference_cpu_seconds

    @property
    def ratio(self) -> float | None:
        if self.seconds is None or self.reference_seconds is None or self.reference_seconds <= 0:
            return None
        return self.seconds / self.reference_seconds

    def passed(self) -> bool | None:
        """True / False against the targets; None when the row has no time target (information only)."""
        if self.figure is not None:
            return self.verdict
        if self.seconds is None:
            return False   # not measured
        memory_ok = self.peak_mb <= (self.memory_limit_mb or 1024.0)   # the reference's memory is not ours to meet
        if self.limit is not None:
            return self.seconds <= self.limit and memory_ok
        if self.ratio_limit is not None:
            return self.ratio is not None and self.ratio <= self.ratio_limit and memory_ok
        return None if memory_ok else False


def _seconds(value: float | None) -> str:
    if value is None:
        return "-"
    return f"{value * 1000:.0f} ms" if value < 1 else f"{value:.2f} s"


def render_table(rows: list, memory_limit_mb: float = 1024.0) -> str:
    header = ("| measure | caseview | reference (hmmlearn) | ratio | CPU ratio | target | peak MB caseview | "
              "peak MB reference | pass |")
    lines = [header, "|" + "---|" * 9]
    for row in rows:
        if row.memory_limit_mb is None:
            row.memory_limit_mb = memory_limit_mb
        ratio = "-" if row.ratio is None else f"{row.ratio:.2f}"
        cpu_ratio = "-" if row.cpu_ratio is None else f"{row.cpu_ratio:.2f}"
        measured = row.seconds is not None or (row.figure is not None and row.figure != "-")
        verdict = "not measured" if not measured else {True: "PASS", False: "FAIL", None: "info"}[row.passed()]
        ref_mb = "-" if row.reference_peak_mb is None else f"{row.reference_peak_mb:.0f}"
        our_mb = "-" if row.peak_mb is None else f"{row.peak_mb:.0f}"
        memory = "" if row.figure is not None else f", <= {row.memory_limit_mb:.0f} MB"
        shown = row.figure if row.figure is not None else _seconds(row.seconds)
        lines.append(f"| {row.measure} | {shown} | {_seconds(row.reference_seconds)} | {ratio} | "
                     f"{cpu_ratio} | {row.target}{memory} | {our_mb} | {ref_mb} | {verdict} |")
    return "\n".join(lines)


def render_results(table: str, notes: list, missing: list, command: str, context: str) -> str:
    out = ["# caseview benchmark results", "", f"Measured {context}.", "", "Reproduce with:", "",
           "```", command.strip(), "```", "", table, ""]
    out += [f"- {n}" for n in notes]
    out += [f"- NOT MEASURED: {m}" for m in missing]
    out += ["", "What each figure means: benchmarks/README.md.", ""]
    return "\n".join(out)
