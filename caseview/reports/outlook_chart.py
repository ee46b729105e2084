"""The outlook chart (matplotlib), drawn the same way in the window and in the PDF report.

Top: expected open cases in each stage at each month end, stacked, in the stage colours
(Okabe-Ito, :func:`caseview.reports.style.stage_colours`), each layer labelled directly at its
right end; a vertical bar at each month end shows that stage's 95% band, drawn around the top of
its layer. Bottom: the follow-up stages together (line, 95% band shaded) and the expected entries
into them per month (bars). The chart only draws numbers computed in
:mod:`caseview.followup.outlook`.
"""

from __future__ import annotations

import numpy as np

from . import style
from .charts import tidy_axes as _tidy


def _dates(outlook, relative: bool = False) -> tuple:
    """x values (as-of first, then the month ends) and one day in x units.

    ``relative``: months after the as-of date instead of calendar dates (de-identified reports).
    """
    if relative:
        return np.arange(len(outlook.dates) + 1, dtype=float), 12.0 / 365.25
    return np.array([np.datetime64(d.isoformat(), "D") for d in (outlook.as_of,) + tuple(outlook.dates)]), \
        np.timedelta64(1, "D")




def _date_axis(ax, relative: bool = False) -> None:
    if relative:
        ax.set_xlabel("months after the as-of date", fontsize=7, color=style.MUTED)
        return
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=3, maxticks=8)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, show_offset=False))


def draw_stages(ax, outlook, size: float = 8.0, relative: bool = False) -> None:
    """Stacked expected counts by stage with each stage's 95% band (see the module docstring)."""
    n = len(outlook.rows) - 1
    x, day = _dates(outlook, relative)
    x = x[1:]
    colours = style.stage_colours(n)
    expected = outlook.expected[:, :n]
    base = np.zeros(len(x))
    offsets = [day * float(v) for v in (np.linspace(-4, 4, n) if n > 1 else [0.0])]
    for s, stage in enumerate(outlook.rows[:n]):
        top = base + expected[:, s]
        ax.fill_between(x, base, top, color=colours[s], alpha=0.55, lw=0, step=None)
        ax.plot(x, top, color=colours[s], lw=1.0)
        low = top - (expected[:, s] - outlook.lower_95[:, s])
        high = top + (outlook.upper_95[:, s] - expected[:, s])
        ax.vlines(x + offsets[s], low, high, color=colours[s], lw=1.6, alpha=0.95)
        middle = (base[-1] + top[-1]) / 2.0
        ax.annotate(f"{stage}  {expected[-1, s]:,.0f}", (x[-1], middle), xytext=(10, 0), textcoords="offset points",
                    va="center", ha="left", fontsize=size, color=style.INK,
                    bbox=dict(boxstyle="square,pad=0.15", fc=colours[s], alpha=0.35, lw=0))
        base = top
    ax.set_ylim(0, max(1.0, float(base.max()) * 1.08, float((outlook.upper_95[:, :n] - expected).max() + base.max())))
    ax.set_xlim(x[0] - 12 * day, x[-1] + 5 * day)
    ax.set_ylabel("expected open cases (stacked)", fontsize=size)
    ax.set_title("Expected cases in each stage at each month end; bars: each stage's 95% band", fontsize=size + 0.5,
                 color=style.INK, loc="left")
    _tidy(ax, size)
    _date_axis(ax, relative)


def draw_follow_up(ax, outlook, size: float = 8.0, relative: bool = False) -> None:
    """The follow-up stages together: expected count with its 95% band, and entries per month."""
    from caseview.followup.outlook import FOLLOW_UP_ROW

    c = outlook.rows.index(FOLLOW_UP_ROW)
    x, day = _dates(outlook, relative)
    x = x[1:]
    colour = style.OKABE_ITO["vermillion"]
    ax.bar(x - 10 * day, outlook.entries_expected[:, c], width=9 * day, color=style.OKABE_ITO["sky_blue"],
           alpha=0.8, label="expected entries that month")
    ax.fill_between(x, outlook.lower_95[:, c], outlook.upper_95[:, c], color=colour, alpha=0.18, lw=0)
    ax.plot(x, outlook.expected[:, c], color=colour, lw=1.8, marker="o", ms=3)
    ax.annotate(f"in follow-up  {outlook.expected[-1, c]:,.0f}\n95%: {outlook.lower_95[-1, c]:,.0f}–"
                f"{outlook.upper_95[-1, c]:,.0f}",
                (x[-1], outlook.expected[-1, c]), xytext=(10, 0), textcoords="offset points", va="center",
                fontsize=size, color=style.INK)
    ax.annotate(f"entries that month  {outlook.entries_expected[-1, c]:,.1f}",
                (x[-1] - 5 * day, outlook.entries_expected[-1, c]), xytext=(10, 0),
                textcoords="offset points", va="center", fontsize=size, color=style.INK)
    ax.set_ylim(0, max(1.0, float(outlook.upper_95[:, c].max()) * 1.12))
    ax.set_xlim(x[0] - 20 * day, x[-1] + 5 * day)
    ax.set_ylabel("cases", fontsize=size)
    ax.set_title("Follow-up stages together (line, shaded 95% band) and entries into them (bars)",
                 fontsize=size + 0.5, color=style.INK, loc="left")
    _tidy(ax, size)
    _date_axis(ax, relative)


def draw_outlook(figure, outlook, size: float = 8.0) -> None:
    """Both panels on ``figure`` (cleared first); the right margin is left for the direct labels."""
    figure.clear()
    grid = figure.add_gridspec(2, 1, height_ratios=(3, 2), hspace=0.45, left=0.09, right=0.76, top=0.93, bottom=0.08)
    draw_stages(figure.add_subplot(grid[0]), outlook, size)
    draw_follow_up(figure.add_subplot(grid[1]), outlook, size)
