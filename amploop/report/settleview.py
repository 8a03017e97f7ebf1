"""The settling time on the compensation-map page: contours of the worst-corner small-signal
settling time over the (Cc, Rc) plane, for a tune that asked for settling.

The closed-loop maps (:attr:`~amploop.report.data.ReportData.cl_maps`) give the response
from the signal source to the output at any (Cc, Rc), and
:class:`~amploop.strategy.settlemap.SettlingLoop` its settling time, the way the tune
predicted it: into the job's ``[transient].band``, over the step run's length after the
step (the job's ``[transient].stop``, else 40/(2π·f_u) of the worst corner, here from the
loop-gain maps at each point). A coarse grid keeps the page quick: each point costs one
rational fit per corner (about a millisecond).
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.lines import Line2D

from amploop.analysis.margins import grid_margins
from amploop.analysis.timedomain import suggested_stop_s
from amploop.report import style
from amploop.report.data import ReportData
from amploop.spice.units import engineering
from amploop.strategy.mapgrid import cc_grid
from amploop.strategy.settlemap import SettlingLoop

__all__ = ["MOST_CORNERS", "settling_contours", "settling_grid"]

#: At most this many corners are evaluated on the grid: the slowest at the chosen point.
MOST_CORNERS = 12
#: The grid of the contours: Cc points (log-spaced) by Rc points.
GRID = (15, 12)
#: Contour levels: these in every decade, the first LEVELS above the fastest time.
NICE, LEVELS = (1.0, 1.5, 2.0, 3.0, 5.0, 7.0), 6


def _step_setup(results: dict) -> tuple[float, float | None] | None:
    """(band, fixed run length in seconds or None) of the tune's step checks, from the
    corners' ``step`` entries: the run's length is the job's ``[transient].stop`` unless it
    equals 40/(2π·f_u) of the worst verified unity-gain frequency (then it follows f_u);
    None without a step check that gave figures."""
    step = next((c["step"] for c in results["corners"]
                 if c.get("step") and c["step"].get("band") is not None), None)
    if step is None:
        return None
    ugf = (results.get("worst") or {}).get("unity_gain_hz")
    follows = bool(ugf) and math.isclose(step["stop_s"], suggested_stop_s(ugf), rel_tol=1e-9)
    return step["band"], None if follows else step["stop_s"]


def _slowest(results: dict, names: list[str]) -> list[str]:
    """Of ``names``, the :data:`MOST_CORNERS` with the longest simulated settling time at
    the chosen point (not settled first), in the job's order."""
    if len(names) <= MOST_CORNERS:
        return names
    times = {c["name"]: c.get("settling_time_s") for c in results["corners"]}
    ranked = sorted(names, key=lambda n: -np.inf if times.get(n) is None else -times[n])
    keep = set(ranked[:MOST_CORNERS])
    return [n for n in names if n in keep]


def settling_grid(data: ReportData, cc: np.ndarray, rc: np.ndarray):
    """The worst-corner predicted settling time on the grid ``cc`` × ``rc`` (F, Ω).

    Parameters
    ----------
    data
        The out folder's figures; its ``maps`` (for the worst unity-gain frequency that
        sets the run's length) and ``cl_maps``.
    cc, rc
        The grid's axes, F and Ω.

    Returns
    -------
    (times, corners, band) or None
        ``times`` of shape (cc.size, rc.size), seconds (NaN where a corner does not settle
        in its run); the corners evaluated; the band. None without closed-loop maps or
        step figures.
    """
    setup = _step_setup(data.results) if data.cl_maps else None
    if setup is None:
        return None
    band, stop_s = setup
    names = _slowest(data.results, list(data.cl_maps))
    loop = SettlingLoop({n: data.cl_maps[n] for n in names}, band, stop_s)
    ugf = np.full((cc.size, rc.size), np.inf)
    if stop_s is None:
        for name in data.maps:
            cmap = data.maps[name]
            pick = slice(None, None, 2)
            values = cmap.loop_gain_values(cc[:, None], rc[None, :], frequency_index=pick)
            ugf = np.fmin(ugf, grid_margins(cmap.frequency_hz[pick], values)[1])
    ugf = np.where(np.isfinite(ugf), ugf, 0.0)
    times = np.zeros((cc.size, rc.size))
    for (i, j), _ in np.ndenumerate(times):
        window = loop.window_s(float(ugf[i, j]))
        times[i, j] = max(_corner_time(loop, n, float(cc[i]), float(rc[j]), window)
                          for n in names)
    return np.where(np.isfinite(times), times, np.nan), names, band


def _corner_time(loop: SettlingLoop, name: str, cc: float, rc: float, window: float) -> float:
    """Corner ``name``'s predicted settling time at (``cc``, ``rc``), seconds: the fit at
    every second frequency, and at every frequency where that one does not settle (a
    spurious unstable pole of the fit near the sweep's low end is then often gone)."""
    value = loop.corner_time(name, cc, rc, window, every=2)
    return value if np.isfinite(value) else loop.corner_time(name, cc, rc, window)


def _levels(times: np.ndarray, ceiling: float | None) -> list[float]:
    """Contour levels, seconds: the first :data:`LEVELS` values of 1, 1.5, 2, 3, 5, 7 per
    decade above the grid's fastest time and below its slowest, the ceiling left out
    (drawn on its own)."""
    finite = times[np.isfinite(times)]
    if finite.size < 2:
        return []
    low, high = float(finite.min()), float(finite.max())
    decade = 10.0 ** np.floor(np.log10(low))
    candidates = [m * decade * 10.0 ** k for k in range(4) for m in NICE]
    levels = [lv for lv in candidates if low < lv < high and not np.isclose(lv, ceiling or 0)]
    return levels[:LEVELS]


def settling_contours(ax, data: ReportData, cc_bounds, rc_bounds) -> tuple[list, str]:
    """Draw labelled contours of the worst-corner predicted settling time over the plane,
    the ceiling bold where there is one.

    Parameters
    ----------
    ax
        The map page's axes.
    data
        The out folder's figures (its ``cl_maps``, ``maps`` and results.json).
    cc_bounds, rc_bounds
        The plane drawn: (min, max) of Cc in F and of Rc in Ω.

    Returns
    -------
    (handles, words)
        The legend's line handles and the page's lines on them (none and "" without
        closed-loop maps).
    """
    cc = cc_grid(*cc_bounds, GRID[0])
    rc = np.linspace(*rc_bounds, GRID[1])
    grid = settling_grid(data, cc, rc)
    if grid is None:
        return [], ""
    times, names, band = grid
    ceiling = (data.results.get("target") or {}).get("settling_time_s")
    levels = _levels(times, ceiling)
    # gaps where a corner's fit does not settle (an unstable pole): left undrawn
    filled = np.ma.masked_invalid(times.T)
    if levels:
        cs = ax.contour(cc, rc, filled, levels=levels, colors=[style.SETTLING],
                        linewidths=0.9, linestyles=":")
        ax.clabel(cs, fmt=lambda v: engineering(v, "s"), fontsize=7)
    handles = [Line2D([], [], color=style.SETTLING, ls=":", lw=1.2,
                      label="worst-corner settling (predicted)")]
    if ceiling is not None and np.nanmin(times) < ceiling < np.nanmax(times):
        ax.contour(cc, rc, filled, levels=[ceiling], colors=[style.SETTLING], linewidths=2.0)
        handles.append(Line2D([], [], color=style.SETTLING, lw=2.0,
                              label=f"settling ceiling {engineering(ceiling, 's')}"))
    which = "every corner" if len(names) == len(data.cl_maps) else \
        f"the {len(names)} slowest corners at the chosen point"
    words = (f"dotted lines: worst-corner settling time\ninto ±{band:.1%}, predicted on the"
             f"\nclosed-loop maps ({which},\n{cc.size} × {rc.size} grid; gaps: a fit that does"
             f"\nnot settle)" + _chosen_words(data.results))
    return handles, words


def _chosen_words(results: dict) -> str:
    """The chosen point's worst-corner settling time, predicted and simulated (the step
    transients), from results.json's ``settling_prediction``; empty without it."""
    agreement = results.get("settling_prediction") or {}
    predicted = {n: a["predicted_s"] for n, a in agreement.items()}
    simulated = {n: a["simulated_s"] for n, a in agreement.items()}
    if not agreement:
        return ""

    def worst(times):
        name = max(times, key=lambda n: math.inf if times[n] is None else times[n])
        value = times[name]
        return ("not settled" if value is None else engineering(value, "s")) + f",\n    {name}"

    return (f"\nworst at the chosen point:\n  simulated {worst(simulated)}"
            f"\n  predicted {worst(predicted)}")
