"""The compensation-map page: the worst phase margin over all corners across the
(Cc, Rc) plane, the region that meets the target (and, for a fully-differential amplifier,
the region where its common-mode loop meets its own), the chosen point."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from matplotlib.patches import Patch

from amploop.analysis.margins import grid_margins
from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.pages import new_page, values_text
from amploop.report.selection import EVERY_CORNER_UP_TO
from amploop.report.settleview import settling_contours
from amploop.spice.units import engineering
from amploop.strategy.mapgrid import cc_grid


def _map_margins(cmap, cc: np.ndarray, rc: np.ndarray, pick=slice(None)):
    """:func:`grid_margins` of ``cmap`` over the grid ``cc`` × ``rc`` (at the frequencies
    ``pick``), a few Cc rows at a time (about 400 000 loop-gain values, 6.4 MB): a 60 × 50
    grid at 401 frequencies would otherwise hold some twenty arrays of 19 MB at once."""
    rows = max(1, 400_000 // (rc.size * cmap.frequency_hz[pick].size))
    parts = []
    for start in range(0, cc.size, rows):
        values = cmap.loop_gain_values(cc[start:start + rows, None], rc[None, :],
                                       frequency_index=pick)
        parts.append(grid_margins(cmap.frequency_hz[pick], values))
    return tuple(np.concatenate(column) for column in zip(*parts))


def _worst_grid(maps: Mapping, cc: np.ndarray, rc: np.ndarray, every: int = 2):
    """The smallest phase and gain margins over the corners' maps ``maps``, on the
    grid ``cc`` × ``rc`` at every ``every``-th frequency, one corner at a time."""
    pm_w = np.full((cc.size, rc.size), np.inf)
    gm_w = np.full((cc.size, rc.size), np.inf)
    for cmap in maps.values():
        pm, _, gm = _map_margins(cmap, cc, rc, slice(None, None, every))
        pm_w = np.fmin(pm_w, np.where(np.isnan(pm), -np.inf, pm))
        gm_w = np.fmin(gm_w, gm)
    return pm_w, gm_w


def map_page(data: ReportData):
    """Phase margin and unity-gain frequency of the limiting corner over (Cc, Rc), from
    its compensation map in ``data``."""
    name = data.limiting_corner
    cmap = data.maps.get(name) if name else None
    device = data.results.get("device") if cmap is not None else None
    fig = new_page()
    hatched = bool(data.cm_maps) and (data.results.get("target") or {}).get(
        "common_mode_phase_margin_deg") is not None
    _heading(fig, name, device, data.limiting_loop if hatched else None)
    ax = fig.add_axes((0.08, 0.1, 0.62, 0.78))
    if cmap is None:
        ax.text(0.5, 0.5, "no compensation map in this out folder", ha="center",
                transform=ax.transAxes)
        return fig
    (cc_lo, cc_hi), (rc_lo, rc_hi), chosen_rc = _plane(data, name, cmap)
    cc = cc_grid(cc_lo, cc_hi, 60)
    rc = np.linspace(rc_lo, rc_hi, 50) if rc_hi > rc_lo else np.array([rc_lo])
    pm, ugf, _ = _map_margins(cmap, cc, rc)
    regions, settling, settling_words = [], [], ""
    if rc.size > 1:
        regions = _shade_feasible(ax, data, name, cc, rc)
        _margin_contours(ax, cc, rc, pm, ugf)
        if data.cl_maps:  # a tune that asked for settling
            settling, settling_words = settling_contours(ax, data, (cc_lo, cc_hi),
                                                         (rc_lo, rc_hi))
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(style.farads)
    ax.yaxis.set_major_formatter(style.ohms)
    ax.set_xlabel("Cc")
    ax.set_ylabel("Rc")
    _points(ax, data.results, cmap, chosen_rc)
    if rc.size > 1:
        pad = 0.03 * (rc[-1] - rc[0])
        ax.set_ylim(rc[0] - pad, rc[-1] + pad)
    handles, labels = ax.get_legend_handles_labels()
    extra = regions + settling
    ax.legend(handles + extra, labels + [h.get_label() for h in extra], loc="upper left",
              bbox_to_anchor=(1.02, 1.0))
    who = "this corner meets" if device else "every corner meets"
    if regions[1:]:  # the common-mode loop's region is drawn too
        words = (f"solid lines: differential phase margin of this corner\n"
                 f"dashed lines: its unity-gain frequency\n"
                 f"green: {who} the differential target\n"
                 f"hatched: {who} the common-mode target\n"
                 f"feasible: green and hatched")
    else:
        words = ("solid lines: phase margin of this corner\ndashed lines: its unity-gain "
                 f"frequency\ngreen: {who} the target")
    if settling_words:
        words += "\n" + settling_words
    fig.text(0.72, 0.55, words, fontsize=8.5, color=style.MUTED, va="top")
    return fig


def _heading(fig, name: str | None, device: dict | None, loop: str | None = None) -> None:
    """The page's title and the line under it: what the map is, or, where a device stands
    in for Rc, what its vertical axis is; the ``loop`` that limits, when there are two
    and the common-mode one is hatched."""
    limits = {None: "", "differential": "; the differential loop limits",
              "common_mode": "; the common-mode loop limits"}[loop]
    fig.text(0.06, 0.95, f"Compensation map of the limiting corner ({name}){limits}",
             fontsize=13, weight="bold")
    if device is None and loop is not None:
        line = ("Every point from three analyses of the corner (each loop gain is bilinear "
                "in Rc + 1/sCc); green: all corners' differential loops meet the target; "
                "hatched: their common-mode loops do.")
    elif device is None:
        line = ("Every point computed from three analyses of the corner (the loop gain is "
                "bilinear in the branch impedance Rc + 1/sCc); shaded: all corners meet the "
                "target.")
    else:
        line = (f"{device['name']} stands in for Rc: the vertical axis is its channel "
                "resistance as this corner sees it; shaded: this corner meets the target.")
    fig.text(0.06, 0.922, line, fontsize=8.5, color=style.MUTED)


def _plane(data: ReportData, name: str, cmap):
    """The (Cc, Rc) plane drawn, in F and Ω: the job's bounds (else three times around the
    map's samples), and the chosen Rc; where a device stands in for Rc, its resistance at
    corner ``name`` and a plane from 0 to three times the largest Rc seen."""
    r = data.results
    knobs = r.get("bounds") or {}
    sample_cc = [s[0] for s in cmap.samples]
    sample_rc = [s[1] for s in cmap.samples]
    cc_bounds = knobs.get("cc", [min(sample_cc) / 3, max(sample_cc) * 3])
    rc_bounds = knobs.get("rc", [0.0, max(max(sample_rc) * 3, 1.0)])
    chosen_rc = r.get("values", {}).get("rc", 0.0)
    if r.get("device") is not None:  # the device's resistance as this corner sees it
        chosen_rc = data.device_corner(name)["resistance_ohm"]
        rc_bounds = [0.0, 3 * max(chosen_rc, max(sample_rc))]
    return cc_bounds, rc_bounds, chosen_rc


def _shade_feasible(ax, data: ReportData, name: str, cc: np.ndarray,
                    rc: np.ndarray) -> list[Patch]:
    """Shade where every corner meets the target (where a device stands in for Rc, where
    corner ``name`` does); nothing without a target. For a fully-differential amplifier
    with a common-mode target, hatch where its common-mode loop meets that (the feasible
    region is where both are), its edge drawn; returns the legend's patches of the two
    regions then (none for one loop)."""
    r = data.results
    target = r.get("target", {})
    if not target:
        return []
    # each corner costs a grid evaluation: above the count where every corner gets a page,
    # the region is found on a grid of half the steps, at every fourth frequency (as the
    # map strategy's first look)
    few = len(data.maps) <= EVERY_CORNER_UP_TO
    shade_cc, shade_rc = (cc, rc) if few else (cc[::2], rc[::2])
    every = 2 if few else 4

    def worst(maps: Mapping):
        return _worst_grid(maps if r.get("device") is None else {name: maps[name]},
                           shade_cc, shade_rc, every)

    pm_w, gm_w = worst(data.maps)
    ok = pm_w >= target["phase_margin_deg"]
    if target.get("gain_margin_db") is not None:
        ok &= gm_w >= target["gain_margin_db"]
    ax.contourf(shade_cc, shade_rc, ok.T.astype(float), levels=[0.5, 1.5],
                colors=[style.FEASIBLE])
    cm_pm = target.get("common_mode_phase_margin_deg")
    if not data.cm_maps or cm_pm is None:
        return []
    # the common-mode region from its slack (degrees, or dB where its gain margin is the
    # tighter), so that its edge is the smooth curve where the slack is nought
    cm_gm = target.get("common_mode_gain_margin_db")
    pm_w, gm_w = worst(data.cm_maps)
    slack = pm_w - cm_pm if cm_gm is None else np.fmin(pm_w - cm_pm, gm_w - cm_gm)
    slack = np.clip(np.nan_to_num(slack, nan=-1e3), -1e3, 1e3).T
    if slack.max() >= 0:
        fill = ax.contourf(shade_cc, shade_rc, slack, levels=[0.0, 1e3], colors="none",
                           hatches=["//"])
        fill.set_edgecolor(style.COMMON_MODE)
        fill.set_linewidth(0)
    if slack.min() < 0 <= slack.max():
        ax.contour(shade_cc, shade_rc, slack, levels=[0.0], colors=[style.COMMON_MODE],
                   linewidths=1.3)
    cm_words = f"≥ {cm_pm:g}°" + (f", ≥ {cm_gm:g} dB" if cm_gm is not None else "")
    return [Patch(facecolor=style.FEASIBLE, label="differential loop meets its target"),
            Patch(facecolor="none", edgecolor=style.COMMON_MODE, hatch="//",
                  label=f"common-mode loop meets its target ({cm_words})")]


def _margin_contours(ax, cc: np.ndarray, rc: np.ndarray, pm: np.ndarray,
                     ugf: np.ndarray) -> None:
    """Solid lines of phase margin ``pm`` (degrees) and dashed ones of unity-gain frequency
    ``ugf`` (Hz) over the grid ``cc`` × ``rc``."""
    levels = [lv for lv in (30, 40, 50, 55, 60, 65, 70, 75, 80, 90)
              if np.nanmin(pm) < lv < np.nanmax(pm)]
    cs = ax.contour(cc, rc, pm.T, levels=levels, colors=[style.FINAL], linewidths=0.9)
    ax.clabel(cs, fmt=lambda v: f"{v:g}°", fontsize=7.5)
    finite = ugf[np.isfinite(ugf)]
    if finite.size:
        ulevels = np.geomspace(finite.min(), finite.max(), 7)[1:-1]
        ulevels = sorted({float(f"{u:.2g}") for u in ulevels})
        cu = ax.contour(cc, rc, ugf.T, levels=ulevels, colors=[style.MUTED], linewidths=0.7,
                        linestyles="--")
        ax.clabel(cu, fmt=lambda v: engineering(v, "Hz", 2), fontsize=7)


_TEXTBOOK_KINDS = ("start", "dominant-pole", "lead", "adjust-cc")


def _points(ax, results: dict, cmap, chosen_rc: float) -> None:
    """The textbook procedure's steps (where it ran), the map's three samples and the
    chosen point (its Rc ``chosen_rc``, in Ω)."""
    history = [h for h in results.get("history", []) if h["kind"] not in ("report-map",)]
    textbook = [h for h in history if h["kind"] in _TEXTBOOK_KINDS]
    if textbook:
        xs = [h["values"]["cc"] for h in textbook]
        ys = [h["values"].get("rc", 0.0) for h in textbook]
        ax.plot(xs, ys, "-o", color=style.TEXTBOOK, ms=4, lw=1.2,
                label="textbook procedure, step by step")
    ax.plot([s[0] for s in cmap.samples], [s[1] for s in cmap.samples],
            "s", color=style.START, ms=6, label="the three simulated samples the map is built on")
    chosen = results.get("values", {})
    if "cc" in chosen:
        ax.plot([chosen["cc"]], [chosen_rc], "*", color=style.FINAL, ms=16,
                markeredgecolor="white", label=f"chosen: {values_text(chosen, results)}",
                zorder=6)
