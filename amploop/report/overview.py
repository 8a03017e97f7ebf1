"""The report's views of many corners at once: the overview page, and the band that all
corners' step responses span (for the step-response page above the corner count where
every corner gets its own page, see :mod:`.selection`).

Both are built from one corner at a time, so their memory does not grow with the corners.
"""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt
import numpy as np

from amploop.report import style
from amploop.report.data import ReportData
from amploop.spice.units import engineering

__all__ = ["StepEnvelope", "overview_page"]


class StepEnvelope:
    """The smallest and largest normalised step response over corners, on one time grid.

    Parameters
    ----------
    stop_s
        The transient's length after the step, seconds; the grid spans −2 % of it to all
        of it.
    points
        Points of the grid.
    """

    def __init__(self, stop_s: float, points: int = 1200) -> None:
        self.time_s = np.linspace(-0.02 * stop_s, stop_s, points)
        self.low = np.full(points, np.inf)
        self.high = np.full(points, -np.inf)

    def add(self, time_s: np.ndarray, response: np.ndarray) -> None:
        """Widen the band by one corner's ``response`` (normalised to its step) at
        ``time_s`` (seconds after the step, increasing), linearly interpolated."""
        values = np.interp(self.time_s, time_s, response, left=np.nan, right=np.nan)
        self.low = np.fmin(self.low, values)
        self.high = np.fmax(self.high, values)

    def draw(self, full, zoom, label: str) -> None:
        """Shade the band on the axes ``full`` (the response) and ``zoom`` (its error in %
        of the step), with the legend text ``label``."""
        seen = np.isfinite(self.low) & np.isfinite(self.high)
        t, low, high = self.time_s[seen], self.low[seen], self.high[seen]
        full.fill_between(t, low, high, color=style.START, alpha=0.35, lw=0, zorder=1,
                          label=label)
        zoom.fill_between(t, (low - 1) * 100, (high - 1) * 100, color=style.START, alpha=0.35,
                          lw=0, zorder=1)


def overview_page(data: ReportData, with_pages: list[str], target_pm: float | None):
    """Every corner's phase margin against its unity-gain frequency, from results.json
    alone; the limiting corner and the corners that have a page of their own are named.

    Parameters
    ----------
    data
        The out folder's figures.
    with_pages
        The corners that have their own page in this report.
    target_pm
        The target phase margin, degrees, drawn as a line; None for none.
    """
    corners = data.results["corners"]
    measured = [c for c in corners if c.get("phase_margin_deg") is not None
                and c.get("unity_gain_hz") is not None]
    failed = [c for c in corners if c.get("status") != "ok"]
    limiting = data.limiting_corner
    fig = plt.figure(figsize=style.PAGE)
    fig.text(0.06, 0.95, f"All {len(corners)} corners at a glance", fontsize=13, weight="bold")
    fig.text(0.06, 0.922, "Phase margin against unity-gain frequency at the final values, one "
             "point per corner. Named: the corners with a page of their own in this report.",
             fontsize=8.5, color=style.MUTED)
    ax = fig.add_axes((0.08, 0.1, 0.62, 0.78))
    if measured:
        ugf = np.array([c["unity_gain_hz"] for c in measured])
        pm = np.array([c["phase_margin_deg"] for c in measured])
        ax.scatter(ugf, pm, s=9, color=style.FINAL, alpha=0.55, lw=0, zorder=3,
                   label=f"{len(measured)} corners measured")
        paged = [i for i, c in enumerate(measured) if c["name"] in set(with_pages)]
        ax.scatter(ugf[paged], pm[paged], s=30, facecolor="none", edgecolor="black", lw=0.8,
                   zorder=4, label="corners with a page")
        for i in paged:
            is_limiting = measured[i]["name"] == limiting
            ax.annotate(measured[i]["name"], (ugf[i], pm[i]), xytext=(4, 3),
                        textcoords="offset points", fontsize=6.5, zorder=6,
                        color=style.LIMIT if is_limiting else "black")
        worst = [i for i, c in enumerate(measured) if c["name"] == limiting]
        if worst:
            ax.plot(ugf[worst], pm[worst], "*", color=style.LIMIT, ms=14, markeredgecolor="white",
                    zorder=5, label=f"limiting corner: {limiting}")
        ax.set_xscale("log")
        ax.xaxis.set_major_formatter(style.hertz)
    else:
        ax.text(0.5, 0.5, "no corner measured", ha="center", transform=ax.transAxes)
    if target_pm is not None:
        ax.axhline(target_pm, color=style.LIMIT, lw=0.8, ls="--",
                   label=f"target {target_pm:g}° of phase margin")
    ax.set_xlabel("unity-gain frequency")
    ax.set_ylabel("phase margin (°)")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0))
    notes = [(f"{len(with_pages)} of {len(corners)} corners have a page: the smallest phase "
              "margins, the smallest unity-gain frequency and gain margin, corners that are "
              "not ok, and those named with --corner-page."),
             ("Every corner's figures are in the table before this page and in results.json; "
              "amploop report OUTDIR --all-corner-pages draws a page for each.")]
    if measured:
        low = min(measured, key=lambda c: c["unity_gain_hz"])
        notes.append(f"Smallest unity-gain frequency: {engineering(low['unity_gain_hz'], 'Hz')} "
                     f"({low['name']}).")
    if failed:
        first = failed[0]
        why = first.get("error") or first.get("suspect_reason") or first.get("status")
        notes.append(f"{len(failed)} corners are not ok, e.g. {first['name']} "
                     f"({first.get('status')}): {why}")
    y = 0.55
    for note in notes:
        for part in textwrap.wrap(note, 48):
            fig.text(0.72, y, part, fontsize=8.5, color=style.MUTED, va="top")
            y -= 0.025
        y -= 0.012
    return fig
