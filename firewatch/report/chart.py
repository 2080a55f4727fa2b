"""The firing chart (matplotlib, no pyplot, no interactive backend): plan, reference, pyrometers, alarms, gaps, bands.

Readable in black and white: every trace has its own line style as well as
its colour, gaps are hatched, and alarms are numbered as in the alarm list.
"""

from __future__ import annotations

from typing import TypedDict

import numpy as np
from matplotlib import dates as mdates
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from numpy.typing import ArrayLike

from firewatch.firing.record import ChartData
from firewatch.settings.timefmt import Clock
from firewatch.settings.units import Units, from_celsius

__all__ = ["axes_rect", "chart_figure", "draw_chart"]

class _Style(TypedDict):
    color: str
    linestyle: str | tuple[float, tuple[float, ...]]
    linewidth: float


_STYLES: tuple[_Style, ...] = (
    {"color": "#1a1a1a", "linestyle": "-", "linewidth": 1.3},
    {"color": "#c0392b", "linestyle": (0, (6, 1.5, 1.5, 1.5)), "linewidth": 1.0},
    {"color": "#1f5fa8", "linestyle": (0, (1.5, 1.2)), "linewidth": 1.2},
    {"color": "#2e8b57", "linestyle": (0, (4, 1.5)), "linewidth": 1.0},
    {"color": "#8e44ad", "linestyle": (0, (1, 1, 4, 1)), "linewidth": 1.0},
)
_PRIORITY_COLOUR = {"high": "#c0392b", "medium": "#d35400", "low": "#b7950b"}


def _days(t: np.ndarray) -> np.ndarray:
    """UTC seconds to matplotlib's date numbers (days since 1970-01-01, its default epoch)."""
    return np.asarray(t, dtype=float) / 86400.0


def _day(t: float) -> float:
    """One UTC time to matplotlib's date number (as :func:`_days`)."""
    return float(t) / 86400.0


def draw_chart(ax: Axes, chart: ChartData, clock: Clock, units: Units, font_pt: float = 7.0) -> None:
    """Draw the firing into ``ax`` (an empty Axes)."""
    def conv(c: np.ndarray | float) -> np.ndarray:
        return from_celsius(np.asarray(c, dtype=float), units.unit)

    ax.tick_params(labelsize=font_pt)
    if chart.start_t is None or chart.end_t is None:
        ax.text(0.5, 0.5, "no readings in this log", transform=ax.transAxes, ha="center", va="center", fontsize=font_pt + 2)
        ax.set_xticks([])
        ax.set_yticks([])
        return
    t0, t1 = chart.start_t, max(chart.end_t, chart.start_t + 60.0)
    if chart.plan_t.size:
        t1 = max(t1, min(float(chart.plan_t[-1]), t0 + 1.5 * (t1 - t0)))
    for cr in chart.critical:
        ax.axhspan(float(conv(cr.low_c)), float(conv(cr.high_c)), color="#f5cba7", alpha=0.55, linewidth=0, zorder=0)
        ax.text(_day(t0 + 0.005 * (t1 - t0)), float(conv(cr.high_c)), f"{cr.name}, ≤ {units.rate(cr.max_rate_c_per_h)}",
                fontsize=font_pt - 1, va="bottom", ha="left", color="#935116", zorder=1)
    first_gap = True
    for a, b in chart.gaps:
        ax.axvspan(_day(a), _day(max(b, a + 0.002 * (t1 - t0))), facecolor="none", edgecolor="#7f7f7f", hatch="////",
                   linewidth=0.4, zorder=1, label="gap in the record" if first_gap else None)
        first_gap = False
    if chart.plan_t.size:
        ax.plot(_days(chart.plan_t), conv(chart.plan_c), color="#7f7f7f", linestyle=(0, (5, 3)), linewidth=1.0,
                label="plan (the schedule from the start)", zorder=2)
    for i, tr in enumerate(chart.traces):
        style = _STYLES[i % len(_STYLES)]
        # the reference (first) is drawn on top: the pyrometers should agree with it and would hide it
        ax.plot(_days(tr.t), conv(tr.value), label=tr.label, zorder=10 - i, **style)
    lo, hi = ax.get_ylim()
    for t, alarm_id, priority in chart.alarms:
        colour = _PRIORITY_COLOUR.get(priority, "#555555")
        ax.axvline(_day(t), color=colour, linewidth=0.5, linestyle=":", zorder=2)
        ax.annotate(str(alarm_id), (_day(t), 1.0), xycoords=("data", "axes fraction"), xytext=(0, 1), textcoords="offset points",
                    ha="center", va="bottom", fontsize=font_pt - 1, color=colour, fontweight="bold", annotation_clip=False)
    ax.set_ylim(min(lo, float(conv(0.0))), hi + 0.04 * (hi - lo))
    ax.set_xlim(_day(t0), _day(t1))
    locator = mdates.AutoDateLocator(tz=clock.zone, minticks=5, maxticks=12)
    formatter = mdates.ConciseDateFormatter(locator, tz=clock.zone, show_offset=False,
                                            formats=["%Y", "%b", "%a %d %b", "%H:%M", "%H:%M", "%S.%f"],
                                            zero_formats=["", "%Y", "%b", "%a %d %b", "%H:%M", "%H:%M"])
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(formatter)
    zone = clock.abbreviation(t0)
    ax.set_xlabel(f"clock time, {clock.name}" + (f" ({zone})" if zone != clock.name else ""), fontsize=font_pt)
    ax.set_ylabel(f"temperature ({units.symbol})", fontsize=font_pt)
    ax.grid(True, color="#dddddd", linewidth=0.4, zorder=0)
    def to_hours(d: ArrayLike) -> np.ndarray:
        return (np.asarray(d, dtype=float) * 86400.0 - t0) / 3600.0

    def to_days(h: ArrayLike) -> np.ndarray:
        return (np.asarray(h, dtype=float) * 3600.0 + t0) / 86400.0

    hours = ax.secondary_xaxis("top", functions=(to_hours, to_days))
    hours.tick_params(labelsize=font_pt - 1)
    hours.set_xlabel("hours from the start", fontsize=font_pt - 1)
    for side in ("top", "right"):
        ax.spines[side].set_linewidth(0.5)
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.17), ncol=2, fontsize=font_pt - 0.5, frameon=False, handlelength=3.2,
              columnspacing=1.5, borderaxespad=0.0)


def axes_rect(width_mm: float, height_mm: float, left_mm: float = 0.0, bottom_mm: float = 0.0,
              page_w_mm: float | None = None, page_h_mm: float | None = None) -> tuple[float, float, float, float]:
    """The plot area inside a chart box, in figure fractions: room left for the temperature axis,
    above for the hours axis, below for the clock axis and the legend."""
    pw, ph = page_w_mm or width_mm, page_h_mm or height_mm
    left, right, top, bottom = 15.0, 3.0, 11.0, 25.0
    return ((left_mm + left) / pw, (bottom_mm + bottom) / ph, (width_mm - left - right) / pw, (height_mm - top - bottom) / ph)


def chart_figure(chart: ChartData, clock: Clock, units: Units, width_mm: float = 180.0, height_mm: float = 100.0,
                 title: str = "") -> Figure:
    """The chart alone on its own figure (``.png`` output, the HTML page); ``title`` (lines) names the firing above it."""
    lines = [x for x in title.split("\n") if x]
    top = 4.5 * len(lines) + (1.5 if lines else 0.0)
    fig = Figure(figsize=(width_mm / 25.4, (height_mm + top) / 25.4))
    for i, line in enumerate(lines):
        fig.text(3.0 / width_mm, 1.0 - (1.5 + 4.5 * i) / (height_mm + top), line, fontsize=8.5 if i == 0 else 7.5,
                 fontweight="bold" if i == 0 else "normal", va="top", ha="left", parse_math=False)
    ax = fig.add_axes(axes_rect(width_mm, height_mm, page_h_mm=height_mm + top))
    draw_chart(ax, chart, clock, units, font_pt=8.0)
    return fig
