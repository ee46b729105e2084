"""Report charts (matplotlib): caseload stage occupancy over time and one small timeline per case.

Charts draw onto an ``Axes`` they are given, so the PDF layout decides sizes. Stage colours come
from :mod:`caseview.reports.style` (Okabe-Ito). Forecast periods are veiled with a translucent
white band and labelled, so history and projection are never confused.
"""

from __future__ import annotations

import numpy as np

from caseview.dates import days_as_datetime64

from . import style


def _as_dates(day_numbers) -> np.ndarray:
    """Day numbers (days since 1970-01-01, float) -> numpy datetime64[D] for date axes."""
    return days_as_datetime64(day_numbers)


def _date_axis(ax) -> None:
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=3, maxticks=7)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, show_offset=True))


def tidy_axes(ax, size: float) -> None:
    """The house look of every report chart: no top/right spines, muted spines, ticks and y label."""
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(style.MUTED)
    ax.tick_params(colors=style.MUTED, labelsize=size, length=3)
    ax.yaxis.label.set_color(style.MUTED)


def _tidy(ax, size: float) -> None:
    """:func:`tidy_axes` for a probability axis (0 to 1)."""
    tidy_axes(ax, size)
    ax.tick_params(axis="x", pad=7)
    ax.set_ylim(0, 1)
    ax.set_yticks([0, 0.5, 1.0])
    ax.xaxis.label.set_color(style.MUTED)


def _veil(ax, start, end, size: float, label: str = "forecast") -> None:
    ax.axvspan(start, end, color="white", alpha=0.45, lw=0, zorder=3)
    ax.axvline(start, color=style.INK, lw=0.9, ls=(0, (4, 2)), zorder=4)
    ax.text(start, 1.015, f" {label} →", transform=ax.get_xaxis_transform(), fontsize=size,
            color=style.INK, va="bottom", ha="left")


def caseload_occupancy(ax, occupancy, stages, as_of_day: int | None, size: float = style.SMALL_SIZE + 0.5) -> None:
    """Stacked mean stage probabilities over the caseload, past and forecast.

    Parameters
    ----------
    ax : matplotlib Axes
    occupancy : caseview.reports.data.Occupancy
    stages : sequence of str
    as_of_day : int or None
        Day number of the as-of date for a calendar axis; None draws days relative to the as-of
        date (de-identified reports).
    """
    relative = occupancy.days_from_as_of
    x = relative if as_of_day is None else _as_dates(as_of_day + relative)
    colours = style.stage_colours(len(stages))
    ax.stackplot(x, occupancy.mean_probabilities.T, colors=colours, labels=list(stages), lw=0.3,
                 edgecolor="white", zorder=2)
    end = x[-1]
    start = 0.0 if as_of_day is None else _as_dates([as_of_day])[0]
    _veil(ax, start, end, size, label=f"forecast, {int(round(relative[-1]))} days")
    ax.text(start, 1.015, "as-of ", transform=ax.get_xaxis_transform(), fontsize=size, color=style.INK,
            va="bottom", ha="right")
    ax.set_xlim(x[0], x[-1])
    _tidy(ax, size)
    ax.set_ylabel("share of caseload\n(mean stage probability)", fontsize=size)
    if as_of_day is None:
        ax.set_xlabel("days relative to the as-of date", fontsize=size)
    else:
        _date_axis(ax)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=min(len(stages), 5), frameon=False,
              fontsize=size, handlelength=1.2, columnspacing=1.2)


def case_timeline(ax, history: dict, stages, x_values, as_of_x, relative: bool, size: float = style.SMALL_SIZE) -> None:
    """One case: smoothed stage probabilities at contacts, then the projection to the horizon.

    Parameters
    ----------
    history : dict
        From :func:`caseview.reports.data.case_history` (``contact_days``, ``smoothed``,
        ``projection_days``, ``projection``).
    x_values : callable
        Maps the case's day numbers to chart x values (:meth:`DateView.case_days_axis`).
    as_of_x : float
        The as-of date in the same x units.
    relative : bool
        True for days since first contact, False for a (possibly shifted) calendar axis.
    """
    days = np.concatenate([history["contact_days"], history["projection_days"][1:]])
    probabilities = np.vstack([history["smoothed"], history["projection"][1:]])
    x = x_values(days)
    contacts = x_values(history["contact_days"])
    end = x[-1]
    if not relative:
        x, contacts, as_of_x, end = _as_dates(x), _as_dates(contacts), _as_dates([as_of_x])[0], _as_dates([end])[0]
    ax.stackplot(x, probabilities.T, colors=style.stage_colours(len(stages)), lw=0.2, edgecolor="white", zorder=2)
    _veil(ax, as_of_x, end, size - 0.5)
    ax.plot(contacts, np.full(len(contacts), -0.06), linestyle="none", marker="|", markersize=5,
            color=style.INK, clip_on=False, zorder=5)
    ax.set_xlim(x[0], x[-1])
    _tidy(ax, size)
    if relative:
        ax.set_xlabel("days since first contact (ticks: contacts)", fontsize=size)
    else:
        _date_axis(ax)
