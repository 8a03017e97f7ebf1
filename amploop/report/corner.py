"""One corner's page: the Bode plot of its loop gain (before and after, when tuned),
its margins, its DC operating point and status, its step figures; for a fully-differential
amplifier the differential loop's, with the common-mode loop's final loop gain beside it."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt
import numpy as np

from amploop.analysis.margins import loop_margins
from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.pages import new_page, shown_value
from amploop.report.summary import corner_status_lines
from amploop.spice.units import engineering


def corner_page(data: ReportData, name: str, target_pm: float | None):
    """Magnitude and phase of one corner's loop gain, with the tuning's story.

    Parameters
    ----------
    data
        The out folder's figures.
    name
        The corner.
    target_pm
        The target phase margin, degrees, drawn on the phase plot; None for none.
    """
    corner = data.corner(name)
    fig = new_page()
    _heading(fig, data, name, corner)
    differential = "differential loop, " if data.results.get("loops") else ""
    mag, phase = _bode(fig, data.curves.get(name, []), differential)
    final = data.finals.get(name)
    cm_final = data.cm_finals.get(name)
    # the loop that crosses over first has its phase margin's words on its left
    fu = loop_margins(final).unity_gain_hz if final is not None else None
    cm_fu = loop_margins(cm_final).unity_gain_hz if cm_final is not None else None
    cm_left = fu is not None and cm_fu is not None and cm_fu < fu
    if final is not None:
        notes = (_margins(mag, phase, final, target_pm, left=cm_fu is not None and not cm_left)
                 + _device_notes(data, name))
    else:
        notes = []
        mag.text(0.5, 0.5, f"not measured: {corner.get('error')}", transform=mag.transAxes,
                 ha="center", color=style.LIMIT, wrap=True)
    sections = [("final values", style.FINAL, notes)]
    if cm_final is not None:
        cm_target = (data.results.get("target") or {}).get("common_mode_phase_margin_deg")
        label = "final" if data.command == "tune" else "as in the netlist"
        sections = [("final values: differential loop", style.FINAL, notes),
                    ("common-mode loop", style.COMMON_MODE,
                     _common_mode(mag, phase, cm_final, cm_target,
                                  f"common-mode loop, {label}", final, cm_left))]
    _side_panel(fig, mag, sections, data.steps.get(name), corner)
    return fig


def _heading(fig, data: ReportData, name: str, corner: dict) -> None:
    """The corner's name (red when it limits), its lib, temperature and parameters, and
    its status badge."""
    limiting = name == data.limiting_corner
    title = f"Corner {name}" + ("  — limiting corner" if limiting else "")
    fig.text(0.06, 0.95, title, fontsize=13, weight="bold",
             color=style.LIMIT if limiting else "black")
    params = ", ".join(f"{k} = {engineering(v)}" for k, v in corner.get("params", {}).items())
    lib = f"lib {corner['lib']}, " if corner.get("lib") else ""
    fig.text(0.06, 0.922, f"{lib}{corner.get('temp', 27):g} °C" + (f", {params}" if params else ""),
             fontsize=9, color=style.MUTED)
    status = corner.get("status", "error")
    fig.text(0.95, 0.95, status.upper(), fontsize=12, color="white", weight="bold", ha="right",
             bbox=dict(boxstyle="round,pad=0.35", edgecolor="none", facecolor={
                 "ok": style.FINAL, "suspect": style.SUSPECT}.get(status, style.LIMIT)))


def _bode(fig, curves: list, final_prefix: str = ""):
    """The magnitude and phase axes with every curve of the corner (final, start, the
    steps between; the final's label after ``final_prefix``); returns ``(mag, phase)``."""
    mag = fig.add_axes((0.07, 0.52, 0.6, 0.36))
    phase = fig.add_axes((0.07, 0.1, 0.6, 0.36), sharex=mag)
    steps = [c for c in curves if c.kind == "step"]
    for curve in curves:
        if curve.kind == "final":
            kw = dict(color=style.FINAL, lw=2.0, zorder=5)
        elif curve.kind == "start":
            kw = dict(color=style.START, lw=1.2, ls="--", zorder=3)
        else:
            kw = dict(color=style.step_colour(steps.index(curve), len(steps)), lw=0.9, zorder=2)
        f = curve.response.frequency_hz
        label = final_prefix + curve.label if curve.kind == "final" else curve.label
        mag.semilogx(f, curve.response.magnitude_db, label=label, **kw)
        phase.semilogx(f, curve.response.phase_deg, **kw)
    mag.axhline(0, color=style.MUTED, lw=0.8)
    phase.axhline(-180, color=style.MUTED, lw=0.8)
    mag.set_ylabel("loop gain |T| (dB)")
    phase.set_ylabel("phase ∠T (°)")
    phase.set_xlabel("frequency")
    phase.xaxis.set_major_formatter(style.hertz)
    plt.setp(mag.get_xticklabels(), visible=False)
    return mag, phase


def _margins(mag, phase, final, target_pm: float | None, left: bool = False) -> list[str]:
    """Limits set to the final curve, the margins drawn on it (the phase margin's words
    left of the crossover when ``left``; and the target phase margin, degrees, when
    given); the notes for the side panel."""
    notes = []
    m = loop_margins(final)
    low = max(-270.0, float(np.nanmin(final.phase_deg)) - 10)
    phase.set_ylim(low, max(20.0, float(np.nanmax(final.phase_deg)) + 10))
    mag.set_ylim(max(-80.0, float(np.nanmin(final.magnitude_db)) - 5),
                 float(np.nanmax(final.magnitude_db)) + 8)
    if m.unity_gain_hz is not None:
        fu, pm = m.unity_gain_hz, m.phase_margin_deg
        for ax in (mag, phase):
            ax.axvline(fu, color=style.FINAL, lw=0.8, ls=":")
        phase.annotate("", xy=(fu, pm - 180), xytext=(fu, -180),
                       arrowprops=dict(arrowstyle="<->", color=style.LIMIT, lw=1.2))
        phase.text(fu / 1.25 if left else fu * 1.25, -180 + pm / 2, f"phase\nmargin\n{pm:.2f}°",
                   color=style.LIMIT, fontsize=8.5, va="center", ha="right" if left else "left",
                   bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))
        mag.text(fu * 1.15, 2, f"crossover {engineering(fu, 'Hz')}", color=style.FINAL,
                 fontsize=9, va="bottom")
        notes += [f"unity-gain frequency {engineering(fu, 'Hz')}", f"phase margin {pm:.2f}°"]
        if target_pm is not None:
            phase.axhline(target_pm - 180, color=style.LIMIT, lw=0.7, ls="--")
            phase.text(final.frequency_hz[0] * 1.3, target_pm - 180 + 2,
                       f"target {target_pm:g}° of margin", color=style.LIMIT, fontsize=7.5)
    if m.gain_margin_db is not None:
        fx, gm = m.phase_crossover_hz, m.gain_margin_db
        mag.annotate("", xy=(fx, -gm), xytext=(fx, 0),
                     arrowprops=dict(arrowstyle="<->", color=style.LIMIT, lw=1.2))
        mag.text(fx * 1.25, -gm / 2, f"gain margin\n{gm:.1f} dB", color=style.LIMIT,
                 fontsize=8.5, va="center",
                 bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))
        phase.axvline(fx, color=style.LIMIT, lw=0.6, ls=":")
        notes.append(f"gain margin {gm:.1f} dB at {engineering(fx, 'Hz')}")
    notes.insert(0, f"DC loop gain {m.dc_loop_gain_db:.1f} dB")
    return notes


def _common_mode(mag, phase, cm_final, cm_target: float | None, label: str,
                 final, left: bool) -> list[str]:
    """The common-mode loop's final loop gain ``cm_final`` on the Bode axes (``label`` in
    the legend), its margins drawn (their words left of its crossover when ``left``), and
    its target phase margin (degrees) when given; the phase axis widened to hold it and the
    differential ``final`` (None: not measured); the notes for the side panel."""
    kw = dict(color=style.COMMON_MODE, lw=1.6, ls=style.COMMON_MODE_LINE, zorder=4)
    f = cm_final.frequency_hz
    mag.semilogx(f, cm_final.magnitude_db, label=label, **kw)
    phase.semilogx(f, cm_final.phase_deg, **kw)
    shown = [cm_final] + ([final] if final is not None else [])
    phase.set_ylim(max(-270.0, min(float(np.nanmin(r.phase_deg)) for r in shown) - 10),
                   max(20.0, max(float(np.nanmax(r.phase_deg)) for r in shown) + 10))
    m = loop_margins(cm_final)
    notes = [f"DC loop gain {m.dc_loop_gain_db:.1f} dB"]
    if m.unity_gain_hz is not None:
        fu, pm = m.unity_gain_hz, m.phase_margin_deg
        for ax in (mag, phase):
            ax.axvline(fu, color=style.COMMON_MODE, lw=0.8, ls=":")
        phase.annotate("", xy=(fu, pm - 180), xytext=(fu, -180),
                       arrowprops=dict(arrowstyle="<->", color=style.COMMON_MODE, lw=1.2))
        phase.text(fu / 1.25 if left else fu * 1.25, -180 + pm / 2,
                   f"CM phase\nmargin\n{pm:.2f}°", fontsize=8.5, color=style.COMMON_MODE,
                   va="center", ha="right" if left else "left",
                   bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))
        notes += [f"unity-gain frequency {engineering(fu, 'Hz')}", f"phase margin {pm:.2f}°"]
        if cm_target is not None:
            phase.axhline(cm_target - 180, color=style.COMMON_MODE, lw=0.7, ls="--")
            phase.text(f[0] * 1.3, cm_target - 180 + 2,
                       f"common-mode target {cm_target:g}° of margin", color=style.COMMON_MODE,
                       fontsize=7.5)
    if m.gain_margin_db is not None:
        fx, gm = m.phase_crossover_hz, m.gain_margin_db
        mag.annotate("", xy=(fx, -gm), xytext=(fx, 0),
                     arrowprops=dict(arrowstyle="<->", color=style.COMMON_MODE, lw=1.2))
        # below its arrow and to the left: the differential gain margin's words are right
        mag.text(fx / 1.2, -gm - 10, f"CM gain margin\n{gm:.1f} dB", color=style.COMMON_MODE,
                 fontsize=8.5, va="top", ha="right",
                 bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))
        notes.append(f"gain margin {gm:.1f} dB at {engineering(fx, 'Hz')}")
    return notes


def _device_notes(data: ReportData, name: str) -> list[str]:
    """The resistance of the MOSFET standing in for Rc at this corner, in ohms, and what
    the corner alone would want (none without such a device)."""
    notes = []
    device = data.results.get("device")
    info = data.device_corner(name)
    if info is not None:
        notes.append(f"{device['name']}: {engineering(info['resistance_ohm'], 'Ω', 4)} "
                     f"(square law {engineering(info['square_law_ohm'], 'Ω', 3)})")
        notes.append(f"  this corner alone would want {engineering(info['wanted_rc_ohm'], 'Ω', 4)}")
    return notes


def _side_panel(fig, mag, sections: list[tuple[str, str, list[str]]], step,
                corner: dict) -> None:
    """The legend, the final values' notes (``sections``: heading, its colour, its notes;
    one per loop), the step figures and the status lines, down the right-hand side of
    the page."""
    handles, labels = mag.get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="upper left", bbox_to_anchor=(0.69, 0.89),
                   title="loop gain at", title_fontsize=8, alignment="left")
    # a second loop's notes start higher and closer, to leave room for the status lines
    y, pitch = (0.4, 0.03) if len(sections) == 1 else (0.5, 0.025)
    for heading, colour, notes in sections:
        fig.text(0.695, y + 0.035, heading, fontsize=9, weight="bold", color=colour)
        for note in notes:
            fig.text(0.695, y, note, fontsize=9)
            y -= pitch
        y -= 0.04 if len(sections) > 1 else 0.0
    y += 0.04 if len(sections) > 1 else 0.0
    if step is not None and step.metrics is not None:
        settle = shown_value(step.metrics.settling_s, "", "s")
        fig.text(0.695, y - 0.01, f"step response: overshoot {step.metrics.overshoot_pct:.2f} %,\n"
                 f"settles to ±{step.metrics.band:.1%} in {settle}", fontsize=9, va="top")
        y -= 0.07
    y -= 0.01
    for line in corner_status_lines(corner):
        colour = style.SUSPECT if line.startswith("SUSPECT") else "black"
        for part in textwrap.wrap(line, 56):
            fig.text(0.695, y, part, fontsize=7.5, color=colour)
            y -= 0.019
