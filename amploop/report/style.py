"""The report's visual language: one colour per meaning, used the same way on every page."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

from matplotlib import colormaps
from matplotlib.ticker import EngFormatter

#: the chosen values (final curves, the chosen point)
FINAL = "#00607a"
#: a fully-differential amplifier's common-mode feedback loop (its curve, its target)
COMMON_MODE = "#3b5fd9"
#: and its line style, apart from the differential loop's solid lines
COMMON_MODE_LINE = (0, (6, 2, 1.5, 2))
#: the netlist's own values, before tuning
START = "#8a8a8a"
#: intermediate steps of the tuning, light to dark in order
STEPS = colormaps["YlOrBr"]
#: targets, limits and the margins read against them
LIMIT = "#b8322b"
#: a corner whose operating point is broken (status "suspect")
SUSPECT = "#c51b7d"
#: where every corner meets the target
FEASIBLE = "#d7ecd9"
#: the textbook procedure's path
TEXTBOOK = "#6a3d9a"
#: the worst-corner settling time's contours on the map page
SETTLING = "#8c510a"
#: text that is secondary
MUTED = "#5a5a5a"
#: Every other configuration's rows in the summary table of a multi-configuration job.
BAND = "#eef3f6"
#: corners in the time-domain overlay (qualitative)
CORNERS = colormaps["tab20"]

PAGE = (11.69, 8.27)  # A4 landscape, inches

RC = {
    "font.size": 9,
    "axes.titlesize": 11,
    "axes.labelsize": 9,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "axes.edgecolor": "#666666",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "figure.dpi": 100,
    "savefig.dpi": 110,
}

hertz = EngFormatter(unit="Hz")
seconds = EngFormatter(unit="s")
farads = EngFormatter(unit="F")
ohms = EngFormatter(unit="Ω")


def corner_colour(index: int):
    """A colour per corner for overlays; reds are left out (red means limiting / limits)."""
    palette = [CORNERS(i) for i in range(20) if i not in (6, 7)]
    return palette[index % len(palette)]


def step_colour(index: int, count: int):
    """Colour of the ``index``-th of ``count`` intermediate steps."""
    if count <= 1:
        return STEPS(0.55)
    return STEPS(0.3 + 0.5 * index / (count - 1))
