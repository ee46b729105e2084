"""The result of a goodness-of-fit check (:func:`hmm.fitting.goodness.goodness_of_fit`) and its text form."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .goodness_occupancy import OccupancyOverTime

__all__ = ["GoodnessOfFit"]


@dataclass(frozen=True)
class GoodnessOfFit:
    """Observed versus expected transitions between consecutive contacts, and the bootstrap test.

    The table is in long form: one entry per cell (channel, from-group, gap band, covariate
    group, to-category) of every group that holds at least one pair.

    Attributes
    ----------
    channel, from_group, gap_band, covariate_group, to_category : list of str, length n_cells
    observed, expected : ndarray, shape (n_cells,)
    statistic : float
        Pearson-type ``sum (O - E)^2 / E`` over the cells with ``E > 0``.
    p_value : float
        Parametric-bootstrap p-value ``(1 + #{T_b >= T}) / (B + 1)``; nan without replicates.
    bootstrap_statistics : ndarray, shape (n_bootstrap,)
    refit : bool
        Whether each replicate was refitted before computing its statistic.
    group_by : str
        ``"category"`` (recorded at the earlier contact) or ``"stage"`` (most likely there).
    n_pairs : int
    gap_band_edges : ndarray
        Inner edges (days) between gap-length bands.
    warnings : tuple of str
    occupancy : OccupancyOverTime or None
        Observed versus expected occupancy of every category over calendar time.
    """

    channel: list
    from_group: list
    gap_band: list
    covariate_group: list
    to_category: list
    observed: np.ndarray
    expected: np.ndarray
    statistic: float
    p_value: float
    bootstrap_statistics: np.ndarray = field(repr=False)
    refit: bool = False
    group_by: str = "category"
    n_pairs: int = 0
    gap_band_edges: np.ndarray = field(default=None, repr=False)
    warnings: tuple = ()
    occupancy: OccupancyOverTime | None = field(default=None, repr=False)

    @property
    def n_bootstrap(self) -> int:
        return int(self.bootstrap_statistics.size)

    @property
    def contributions(self) -> np.ndarray:
        """``(O - E)^2 / E`` per cell (0 where ``E == 0``), shape (n_cells,)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.expected > 0, (self.observed - self.expected) ** 2 / self.expected, 0.0)

    def format_table(self) -> str:
        """A plain-text table: per channel, one line per group with observed / expected of each category."""
        lines, contributions = [], self.contributions
        group_key = list(zip(self.channel, self.from_group, self.gap_band, self.covariate_group))
        order = list(dict.fromkeys(group_key))
        columns = {key: [] for key in order}
        for i, key in enumerate(group_key):
            columns[key].append(i)
        widths = [max([len(key[j]) for key in order] + [len(h)]) for j, h in
                  enumerate(("", "from" if self.group_by == "category" else "from (most likely stage)",
                             "gap", "covariates"))]
        channel = None
        for key in order:
            cells = columns[key]
            if key[0] != channel:
                channel = key[0]
                heads = [f"{self.to_category[i]} O/E" for i in cells]
                lines.append("")
                lines.append(f"channel {channel}: observed / expected next category")
                lines.append(f"  {'from' if self.group_by == 'category' else 'from (most likely stage)':<{widths[1]}}"
                             f"  {'gap':<{widths[2]}}  {'covariates':<{widths[3]}}  {'pairs':>6}  "
                             + "  ".join(f"{h:>16}" for h in heads) + "  (O-E)^2/E")
            numbers = "  ".join(f"{f'{self.observed[i]:.0f} / {self.expected[i]:.1f}':>16}" for i in cells)
            lines.append(f"  {key[1]:<{widths[1]}}  {key[2]:<{widths[2]}}  {key[3]:<{widths[3]}}  "
                         f"{self.observed[cells].sum():>6.0f}  {numbers}  {contributions[cells].sum():9.2f}")
        lines.append("")
        lines.append(f"Pearson-type statistic  {self.statistic:,.2f}  ({len(self.observed)} cells, "
                     f"{self.n_pairs} pairs of consecutive contacts)")
        if self.n_bootstrap:
            how = "each replicate refitted" if self.refit else "parameters not re-estimated, so conservative"
            lines.append(f"bootstrap p-value       {self.p_value:.3f}  ({self.n_bootstrap} simulated caseloads; "
                         f"{how})")
        else:
            lines.append("bootstrap p-value       not computed (no replicates asked for)")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines).lstrip("\n")
