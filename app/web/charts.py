"""Seven-day saturation chart per station, drawn with matplotlib.

A ``Figure`` with its own SVG canvas: no pyplot global state and no display, so it is safe
in a threaded web server and on a headless hatchery computer.
"""

from __future__ import annotations

import io
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import matplotlib
import matplotlib.dates as mdates
import numpy as np
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure

from app.status.compute import DEFAULT_MAX_GAP, to_epoch_seconds

# Our own palette: deep sea blue for the water as measured, kelp green family for the
# water as the larvae will get it, brick red for the floor.
IN_SITU_COLOUR = "#24527a"
TANK_COLOURS = ("#2e8b57", "#7a9a01", "#0f766e", "#5b8c5a")
FLOOR_COLOUR = "#b03a2e"
UNDERSATURATED_FILL = "#f4d6d2"


@dataclass(frozen=True)
class Series:
    label: str
    times: Sequence[datetime]
    values: Sequence[float | None]


def _utc64(times: Sequence[datetime] | datetime) -> np.ndarray:
    """Aware datetimes as naive UTC datetime64 (matplotlib's date axis works in UTC)."""
    seconds = to_epoch_seconds([times] if isinstance(times, datetime) else times)
    return (seconds * 1e6).astype(np.int64).astype("datetime64[us]")


def _with_breaks(series: Series, max_gap: timedelta) -> tuple[np.ndarray, np.ndarray]:
    """Times and values with a NaN inserted in every gap longer than ``max_gap``.

    A line drawn across an outage would invent data that was never measured.
    """
    t = _utc64(series.times)
    v = np.array([np.nan if x is None else x for x in series.values], dtype=float)
    if t.size < 2:
        return t, v
    order = np.argsort(t)
    t, v = t[order], v[order]
    gaps = np.flatnonzero(np.diff(t) > np.timedelta64(max_gap))
    if gaps.size:
        t = np.insert(t, gaps + 1, t[gaps] + np.timedelta64(1, "s"))
        v = np.insert(v, gaps + 1, np.nan)
    return t, v


# Figure size and type sizes, chosen together: the page shows the chart about 300 to 420 px
# wide (a station card, on a phone or a desktop), so a 4.2-inch figure is drawn at 0.7 to
# 1.0 of its size and 10-point text stays about 10 px or larger on a phone.
FIGURE_SIZE_IN = (4.2, 3.6)
TITLE_PT = 11.5
LABEL_PT = 10.5
TICK_PT = 10.0
LEGEND_PT = 9.5
# Characters per title line at TITLE_PT across the figure; longer titles wrap, never cut.
TITLE_LINE_CHARS = 40


def _wrapped(title: str) -> str:
    return "\n".join(textwrap.wrap(title, TITLE_LINE_CHARS)) or title


def omega_week_svg(
    *,
    title: str,
    in_situ: Series,
    at_tank_temperature: Sequence[Series],
    floors: Sequence[tuple[str, float]],
    start: datetime,
    end: datetime,
    timezone: str,
    max_gap: timedelta = DEFAULT_MAX_GAP,
) -> str:
    """Return an SVG document: omega aragonite in situ and at tank temperature, with floors.

    Sized for the width a station card has on a phone or a desktop (see ``FIGURE_SIZE_IN``);
    the title wraps and the legend sits below the axes in one column, and the saved box is
    fitted to everything drawn, so no title or legend text is cut. The SVG scales to its box.
    """
    zone = ZoneInfo(timezone)
    fig = Figure(figsize=FIGURE_SIZE_IN, dpi=100)
    FigureCanvasSVG(fig)
    ax = fig.add_subplot(1, 1, 1)
    ax.axhspan(0.0, 1.0, color=UNDERSATURATED_FILL, zorder=0, linewidth=0)

    t, v = _with_breaks(in_situ, max_gap)
    ax.plot(t, v, color=IN_SITU_COLOUR, linewidth=1.4, label=in_situ.label)
    for colour, series in zip(TANK_COLOURS * 4, at_tank_temperature, strict=False):
        t, v = _with_breaks(series, max_gap)
        ax.plot(t, v, color=colour, linewidth=1.9, label=series.label)
    for label, level in floors:
        ax.axhline(level, color=FLOOR_COLOUR, linestyle=(0, (6, 3)), linewidth=1.4, label=label)

    ax.set_xlim(_utc64(start)[0], _utc64(end)[0])
    ax.set_ylim(bottom=0.0)
    ax.set_ylabel("Ω aragonite", fontsize=LABEL_PT)
    ax.set_title(_wrapped(title), fontsize=TITLE_PT, loc="left")
    ax.xaxis.set_major_locator(mdates.DayLocator(tz=zone))
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%a", tz=zone))
    ax.tick_params(labelsize=TICK_PT)
    ax.grid(True, color="#d9dee3", linewidth=0.8)
    # Below the axes, so that it never hides a week's worth of data; one column, so a long
    # label ("at tank temperature 25 °C") has the whole width.
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.12), fontsize=LEGEND_PT,
              frameon=False, ncol=1, borderaxespad=0.0)
    fig.tight_layout()

    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": "spatline", "svg.fonttype": "none"}):
        # The tight box takes in the legend below the axes and the wrapped title.
        fig.savefig(buffer, format="svg", metadata={"Date": None}, bbox_inches="tight",
                    pad_inches=0.08)
    return buffer.getvalue()
