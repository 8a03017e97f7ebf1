"""The tuning-history page: the worst corner's phase margin of every simulated point
against the AC analyses spent."""

from __future__ import annotations

import matplotlib.pyplot as plt
from matplotlib.ticker import LogLocator

from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.pages import new_page
from amploop.strategy.kinds import TEXTBOOK_KINDS, kind_label


def convergence_page(data: ReportData, target_pm: float | None):
    """Worst-corner phase margin and unity-gain frequency against the analyses spent.

    Parameters
    ----------
    data
        The out folder's figures; the tuning history comes from its results.json.
    target_pm
        The target phase margin, degrees: the band from it to the tolerance above it is
        shaded; None for none.
    """
    history = [h for h in data.results.get("history", [])
               if h["kind"] != "report-map" and h.get("worst_phase_margin_deg") is not None]
    fig = new_page()
    fig.text(0.06, 0.95, "How the tuning got there", fontsize=13, weight="bold")
    fig.text(0.06, 0.922, "Worst corner of every simulated point against the AC analyses spent "
             "so far (all corners counted).", fontsize=8.5, color=style.MUTED)
    top = fig.add_axes((0.08, 0.54, 0.84, 0.34))
    bottom = fig.add_axes((0.08, 0.1, 0.84, 0.34), sharex=top)
    if not history:
        top.text(0.5, 0.5, "no tuning history (a measurement)", ha="center", transform=top.transAxes)
        return fig
    x = [h["ac_analyses"] for h in history]
    pm = [h["worst_phase_margin_deg"] for h in history]
    ugf = [h["worst_unity_gain_hz"] for h in history]
    kinds = [h["kind"] for h in history]
    for kind in dict.fromkeys(kinds):
        sel = [i for i, k in enumerate(kinds) if k == kind]
        colour = style.FINAL if kind == "verify" else (
            style.TEXTBOOK if kind in TEXTBOOK_KINDS else style.START)
        top.plot([x[i] for i in sel], [pm[i] for i in sel], "o", color=colour,
                 label=kind_label(kind))
        bottom.plot([x[i] for i in sel], [ugf[i] for i in sel], "o", color=colour)
    top.plot(x, pm, "-", color="#bbbbbb", lw=0.8, zorder=0)
    bottom.plot(x, ugf, "-", color="#bbbbbb", lw=0.8, zorder=0)
    if target_pm is not None:
        tol = data.results["target"]["tolerance_deg"]
        top.axhspan(target_pm, target_pm + tol, color=style.FEASIBLE, zorder=0)
        top.axhline(target_pm, color=style.LIMIT, lw=0.8, ls="--")
        top.text(x[0], target_pm + tol, f" target {target_pm:g}° (+{tol:g}°)", color=style.LIMIT,
                 fontsize=8, va="bottom")
    top.set_ylabel("worst-corner phase margin (°)")
    bottom.set_ylabel("worst-corner unity-gain frequency")
    bottom.set_yscale("log")
    bottom.yaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
    bottom.yaxis.set_major_formatter(style.hertz)
    bottom.yaxis.set_minor_formatter(plt.NullFormatter())
    bottom.set_xlabel("AC analyses so far")
    top.legend(loc="lower right", title="point", title_fontsize=8)
    plt.setp(top.get_xticklabels(), visible=False)
    return fig
