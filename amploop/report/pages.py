"""The report's pages, one function each, drawn from :class:`~.data.ReportData`."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.ticker import LogLocator

from amploop.analysis.margins import grid_margins, loop_margins
from amploop.bench.oppoint import status_label, warning_advice
from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.overview import StepEnvelope, overview_page
from amploop.report.selection import EVERY_CORNER_UP_TO
from amploop.spice.units import describe_values, engineering
from amploop.strategy.mapsolve import cc_grid

__all__ = [
    "convergence_page",
    "corner_page",
    "map_page",
    "overview_page",
    "step_rerun_command",
    "steps_absent_note",
    "summary_page_count",
    "summary_pages",
    "time_domain_page",
]

CAUTIONS = (
    "Results are only as good as the device models and netlist they were simulated with. "
    "A small-signal loop gain says nothing about slewing or large-signal settling. "
    "Sign-off stays with the designer's own models, simulator, flow and foundry rules."
)

ROWS_FIRST, ROWS_MORE = 18, 34


def _figure():
    return plt.figure(figsize=style.PAGE)


def _fmt(value, spec: str, unit: str = "") -> str:
    if value is None:
        return "–"
    if unit:
        return engineering(value, unit)
    return format(value, spec)


def _values_text(values: dict, results: dict | None = None) -> str:
    device = (results or {}).get("device")
    return describe_values(values, joiner=",  ",
                           device=(device["name"], device["size"]) if device else None)


def _corner_rows(data: ReportData) -> list[list[str]]:
    limiting = data.limiting_corner
    rows = []
    for c in data.results["corners"]:
        mark = " ◀ limiting" if c["name"] == limiting else ""
        rows.append([
            c["name"] + mark,
            _fmt(c.get("dc_loop_gain_db"), ".1f"),
            _fmt(c.get("unity_gain_hz"), "", "Hz"),
            _fmt(c.get("phase_margin_deg"), ".2f"),
            _fmt(c.get("gain_margin_db"), ".1f"),
            _fmt(c.get("overshoot_pct"), ".2f"),
            _fmt(c.get("settling_time_s"), "", "s"),
            status_label(c.get("status", "error"), c.get("warnings", ())),
        ])
    return rows


_HEADER = ["corner", "DC loop gain\n(dB)", "unity-gain\nfrequency", "phase margin\n(°)",
           "gain margin\n(dB)", "step overshoot\n(%)", "settling\ntime", "status"]


def _table(ax, rows: list[list[str]], limiting_rows: set[int]) -> None:
    ax.axis("off")
    table = ax.table(cellText=rows, colLabels=_HEADER, loc="upper center", cellLoc="right",
                     colLoc="right", colWidths=[0.26, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.07])
    table.auto_set_font_size(False)
    table.set_fontsize(8)
    table.scale(1, 1.25)
    for (row, col), cell in table.get_celld().items():
        if row == 0:
            cell.set_height(cell.get_height() * 1.9)
        cell.set_edgecolor("#cccccc")
        cell.set_linewidth(0.4)
        if col == 0:
            cell.set_text_props(ha="left")
            cell._loc = "left"
        if row == 0:
            cell.set_text_props(weight="bold", color="#333333")
            cell.set_facecolor("#f0f0f0")
        elif rows[row - 1][-1].startswith("SUSPECT"):
            cell.set_text_props(color=style.SUSPECT, weight="bold" if row - 1 in limiting_rows
                                else "normal")
        elif row - 1 in limiting_rows:
            cell.set_text_props(color=style.LIMIT, weight="bold")
        elif rows[row - 1][-1].startswith("ERROR"):
            cell.set_text_props(color=style.LIMIT)


def summary_page_count(corners: int) -> int:
    """How many pages :func:`summary_pages` draws for ``corners`` corners."""
    return 1 + max(0, -(-(corners - ROWS_FIRST) // ROWS_MORE))


def summary_pages(data: ReportData, date: str, render_seconds_hint: str = ""):
    """Page 1 (and continuation pages of the corner table for long corner lists), one
    figure at a time (a generator: the caller closes each before the next is drawn).

    Parameters
    ----------
    data
        The out folder's figures.
    date
        The date and time shown under the title.
    render_seconds_hint
        Text added after the cautions in the first page's footer (empty: nothing).
    """
    r = data.results
    rows = _corner_rows(data)
    limiting = {i for i, c in enumerate(r["corners"]) if c["name"] == data.limiting_corner}
    fig = _figure()
    fig.text(0.05, 0.94, f"amploop report — {r['job']}", fontsize=17, weight="bold")
    status = r.get("status", "?")
    colour = {"ok": style.FINAL, "converged": style.FINAL, "suspect": style.SUSPECT}.get(
        status, style.LIMIT)
    what = ("tuned with the " + r.get("strategy", "map") + " strategy") if data.command == "tune" \
        else "measured at the netlist's values"
    fig.text(0.05, 0.905, f"{date}   ·   {len(rows)} corners {what}", fontsize=10,
             color=style.MUTED)
    fig.text(0.95, 0.94, status.upper(), fontsize=15, color="white", weight="bold", ha="right",
             bbox=dict(boxstyle="round,pad=0.4", facecolor=colour, edgecolor="none"))
    lines = []
    if data.command == "tune":
        t = r["target"]
        gm = f", gain margin ≥ {t['gain_margin_db']:g} dB" if t.get("gain_margin_db") is not None else ""
        lines.append(f"Target: worst-corner phase margin ≥ {t['phase_margin_deg']:g}° "
                     f"(within +{t['tolerance_deg']:g}°){gm}")
        lines.append(f"Chosen: {_values_text(r['values'], r)}")
        if r.get("message"):
            lines.append(r["message"])
    else:
        lines.append(f"Values in effect: {_values_text(r['values'], r)}")
    first_step = next((c["step"] for c in r["corners"]
                       if c.get("step") and c["step"].get("band") is not None), None)
    if first_step:
        lines.append(f"Step response: {engineering(first_step['step_v'], 'V')} input step at the "
                     f"signal source; settling time to ±{first_step['band']:.1%} of the output step")
    ac = r.get("ac_analyses", {})
    tr = r.get("transient_analyses", {})
    lines.append(f"AC analyses: {ac.get('run', 0)} run, {ac.get('reused', 0)} reused;  "
                 f"step transients: {tr.get('run', 0)} run, {tr.get('reused', 0)} reused;  "
                 f"wall time {r.get('seconds', 0):.1f} s")
    lines += _status_notes(r["corners"])
    y = 0.86
    for line in lines:
        for part in textwrap.wrap(line, 150):
            fig.text(0.05, y, part, fontsize=9.5)
            y -= 0.028
    first = rows[:ROWS_FIRST]
    ax = fig.add_axes((0.05, 0.12, 0.9, y - 0.14))
    _table(ax, first, {i for i in limiting if i < ROWS_FIRST})
    if len(rows) > ROWS_FIRST:
        fig.text(0.05, 0.1, f"… table continues: {len(rows) - ROWS_FIRST} more corners on the "
                 "next page(s)", fontsize=8, color=style.MUTED)
    _footer(fig, render_seconds_hint)
    yield fig
    for start in range(ROWS_FIRST, len(rows), ROWS_MORE):
        fig = _figure()
        fig.text(0.05, 0.94, f"Corners {start + 1}–{min(start + ROWS_MORE, len(rows))} of "
                 f"{len(rows)}", fontsize=13, weight="bold")
        ax = fig.add_axes((0.05, 0.1, 0.9, 0.8))
        chunk = rows[start:start + ROWS_MORE]
        _table(ax, chunk, {i - start for i in limiting if start <= i < start + ROWS_MORE})
        _footer(fig)
        yield fig


def _status_notes(corners: list[dict]) -> list[str]:
    """Under the summary's header: how many corners are suspect and why that matters, and
    each simulator warning once with what it means (the table's ``gmin`` marks)."""
    notes = []
    suspect = [c["name"] for c in corners if c.get("status") == "suspect"]
    if suspect:
        notes.append(f"SUSPECT ({len(suspect)} of {len(corners)} corners): the margins were read, "
                     "but the operating point behind them is broken or the DC loop gain is below "
                     "the limit, so they do not describe the amplifier; each corner's page says "
                     "why (first: " + suspect[0] + ").")
    by_warning: dict[str, int] = {}
    for c in corners:
        for warning in c.get("warnings", ()):
            by_warning[warning] = by_warning.get(warning, 0) + 1
    for warning, count in by_warning.items():
        mark = "gmin: " if "gmin stepping" in warning else ""
        advice = warning_advice(warning)
        notes.append(f"{mark}{warning} at {count} of {len(corners)} corners"
                     + (f": {advice}." if advice else "."))
    return notes


def _corner_status_lines(corner: dict) -> list[str]:
    """The corner page's lines on its status, operating point and simulator warnings."""
    lines = []
    if corner.get("status") == "suspect":
        lines.append(f"SUSPECT: {corner.get('suspect_reason')}")
    op = corner.get("operating_point")
    if op:
        shift = op.get("output_shift_v")
        lines.append(f"DC output {_fmt(op.get('output_v'), '', 'V')} against the common mode "
                     f"{_fmt(op.get('common_mode_v'), '', 'V')}"
                     + (f" ({'+' if shift > 0 else '−'}{engineering(abs(shift), 'V')})"
                        if shift else ""))
        for d in op.get("devices", ()):
            region = d.get("region") or "region unknown (the model gives no VDS/VDSAT)"
            figures = "" if d.get("region") is None else (
                f", |VDS| {engineering(abs(d['vds_v']), 'V')}, VDSAT "
                f"{engineering(abs(d['vdsat_v']), 'V')}")
            lines.append(f"{d['name']} ({d['role'].replace('_', ' ')}): {region}{figures}")
    for warning in corner.get("warnings", ()):
        advice = warning_advice(warning)
        lines.append(f"{warning}" + (f": {advice}" if advice else ""))
    return lines


def _footer(fig, extra: str = "") -> None:
    text = "Cautions: " + CAUTIONS + (f"  {extra}" if extra else "")
    for i, part in enumerate(textwrap.wrap(text, 190)):
        fig.text(0.05, 0.045 - 0.018 * i, part, fontsize=7, color=style.MUTED)


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
    fig = _figure()
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
    mag = fig.add_axes((0.07, 0.52, 0.6, 0.36))
    phase = fig.add_axes((0.07, 0.1, 0.6, 0.36), sharex=mag)
    curves = data.curves.get(name, [])
    steps = [c for c in curves if c.kind == "step"]
    for curve in curves:
        if curve.kind == "final":
            kw = dict(color=style.FINAL, lw=2.0, zorder=5)
        elif curve.kind == "start":
            kw = dict(color=style.START, lw=1.2, ls="--", zorder=3)
        else:
            kw = dict(color=style.step_colour(steps.index(curve), len(steps)), lw=0.9, zorder=2)
        f = curve.response.frequency_hz
        mag.semilogx(f, curve.response.magnitude_db, label=curve.label, **kw)
        phase.semilogx(f, curve.response.phase_deg, **kw)
    mag.axhline(0, color=style.MUTED, lw=0.8)
    phase.axhline(-180, color=style.MUTED, lw=0.8)
    mag.set_ylabel("loop gain |T| (dB)")
    phase.set_ylabel("phase ∠T (°)")
    phase.set_xlabel("frequency")
    phase.xaxis.set_major_formatter(style.hertz)
    plt.setp(mag.get_xticklabels(), visible=False)
    final = data.finals.get(name)
    notes = []
    if final is not None:
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
            phase.text(fu * 1.25, -180 + pm / 2, f"phase\nmargin\n{pm:.2f}°", color=style.LIMIT,
                       fontsize=8.5, va="center", ha="left",
                       bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1))
            mag.text(fu * 1.15, 2, f"crossover {engineering(fu, 'Hz')}", color=style.FINAL,
                     fontsize=9, va="bottom")
            notes += [f"unity gain {engineering(fu, 'Hz')}", f"phase margin {pm:.2f}°"]
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
        device = data.results.get("device")
        if device and name in device.get("corners", {}):
            info = device["corners"][name]
            notes.append(f"{device['name']}: {engineering(info['resistance_ohm'], 'Ω', 4)} "
                         f"(square law {engineering(info['square_law_ohm'], 'Ω', 3)})")
            notes.append(f"  this corner alone would want {engineering(info['wanted_rc_ohm'], 'Ω', 4)}")
    else:
        mag.text(0.5, 0.5, f"not measured: {corner.get('error')}", transform=mag.transAxes,
                 ha="center", color=style.LIMIT, wrap=True)
    handles, labels = mag.get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="upper left", bbox_to_anchor=(0.69, 0.89),
                   title="loop gain at", title_fontsize=8, alignment="left")
    y = 0.4
    fig.text(0.695, y + 0.035, "final values", fontsize=9, weight="bold", color=style.FINAL)
    for note in notes:
        fig.text(0.695, y, note, fontsize=9)
        y -= 0.03
    step = data.steps.get(name)
    if step is not None and step.metrics is not None:
        settle = _fmt(step.metrics.settling_s, "", "s")
        fig.text(0.695, y - 0.01, f"step response: overshoot {step.metrics.overshoot_pct:.2f} %,\n"
                 f"settles to ±{step.metrics.band:.1%} in {settle}", fontsize=9, va="top")
        y -= 0.07
    y -= 0.01
    for line in _corner_status_lines(corner):
        colour = style.SUSPECT if line.startswith("SUSPECT") else "black"
        for part in textwrap.wrap(line, 56):
            fig.text(0.695, y, part, fontsize=7.5, color=colour)
            y -= 0.019
    return fig


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


def _worst_grid(data: ReportData, cc: np.ndarray, rc: np.ndarray, every: int = 2):
    """The smallest phase and gain margins over the corners' maps in ``data``, on the
    grid ``cc`` × ``rc`` at every ``every``-th frequency, one corner at a time."""
    pm_w = np.full((cc.size, rc.size), np.inf)
    gm_w = np.full((cc.size, rc.size), np.inf)
    for cmap in data.maps.values():
        pm, _, gm = _map_margins(cmap, cc, rc, slice(None, None, every))
        pm_w = np.fmin(pm_w, np.where(np.isnan(pm), -np.inf, pm))
        gm_w = np.fmin(gm_w, gm)
    return pm_w, gm_w


def map_page(data: ReportData):
    """Phase margin and unity-gain frequency of the limiting corner over (Cc, Rc), from
    its compensation map in ``data``."""
    name = data.limiting_corner
    cmap = data.maps.get(name) if name else None
    fig = _figure()
    fig.text(0.06, 0.95, f"Compensation map of the limiting corner ({name})", fontsize=13,
             weight="bold")
    fig.text(0.06, 0.922, "Every point computed from three analyses of the corner (the loop gain "
             "is bilinear in the branch impedance Rc + 1/sCc); shaded: all corners meet the target.",
             fontsize=8.5, color=style.MUTED)
    ax = fig.add_axes((0.08, 0.1, 0.62, 0.78))
    if cmap is None:
        ax.text(0.5, 0.5, "no compensation map in this out folder", ha="center",
                transform=ax.transAxes)
        return fig
    r = data.results
    knobs = r.get("bounds") or {}
    device = r.get("device")
    cc_lo, cc_hi = knobs.get("cc", [min(s[0] for s in cmap.samples) / 3, max(s[0] for s in cmap.samples) * 3])
    rc_lo, rc_hi = knobs.get("rc", [0.0, max(max(s[1] for s in cmap.samples) * 3, 1.0)])
    chosen_rc = r.get("values", {}).get("rc", 0.0)
    if device is not None:  # the device's resistance as this corner sees it
        chosen_rc = device["corners"][name]["resistance_ohm"]
        rc_lo, rc_hi = 0.0, 3 * max(chosen_rc, max(s[1] for s in cmap.samples))
        fig.texts[1].set_text(f"{device['name']} stands in for Rc: the vertical axis is its "
                              "channel resistance as this corner sees it; shaded: this corner "
                              "meets the target.")
    cc = cc_grid(cc_lo, cc_hi, 60)
    rc = np.linspace(rc_lo, rc_hi, 50) if rc_hi > rc_lo else np.array([rc_lo])
    pm, ugf, _ = _map_margins(cmap, cc, rc)
    if rc.size > 1:
        target = r.get("target", {})
        if target:
            # each corner costs a grid evaluation: above the count where every corner gets
            # a page, the region is found on a grid of half the steps, at every fourth
            # frequency (as the map strategy's first look)
            few = len(data.maps) <= EVERY_CORNER_UP_TO
            shade_cc, shade_rc = (cc, rc) if few else (cc[::2], rc[::2])
            every = 2 if few else 4
            pm_w, gm_w = _worst_grid(data, shade_cc, shade_rc, every) if device is None else \
                _worst_grid(ReportData(data.out, r, [name], maps={name: cmap}), shade_cc,
                            shade_rc, every)
            ok = pm_w >= target["phase_margin_deg"]
            if target.get("gain_margin_db") is not None:
                ok &= gm_w >= target["gain_margin_db"]
            ax.contourf(shade_cc, shade_rc, ok.T.astype(float), levels=[0.5, 1.5],
                        colors=[style.FEASIBLE])
        levels = [lv for lv in (30, 40, 50, 55, 60, 65, 70, 75, 80, 90) if np.nanmin(pm) < lv < np.nanmax(pm)]
        cs = ax.contour(cc, rc, pm.T, levels=levels, colors=[style.FINAL], linewidths=0.9)
        ax.clabel(cs, fmt=lambda v: f"{v:g}°", fontsize=7.5)
        finite = ugf[np.isfinite(ugf)]
        if finite.size:
            ulevels = np.geomspace(finite.min(), finite.max(), 7)[1:-1]
            ulevels = sorted({float(f"{u:.2g}") for u in ulevels})
            cu = ax.contour(cc, rc, ugf.T, levels=ulevels, colors=[style.MUTED], linewidths=0.7,
                            linestyles="--")
            ax.clabel(cu, fmt=lambda v: engineering(v, "Hz", 2), fontsize=7)
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(style.farads)
    ax.yaxis.set_major_formatter(style.ohms)
    ax.set_xlabel("Cc")
    ax.set_ylabel("Rc")
    history = [h for h in r.get("history", []) if h["kind"] not in ("report-map",)]
    textbook = [h for h in history if h["kind"] in ("start", "dominant-pole", "lead", "adjust-cc")]
    if textbook:
        xs = [h["values"]["cc"] for h in textbook]
        ys = [h["values"].get("rc", 0.0) for h in textbook]
        ax.plot(xs, ys, "-o", color=style.TEXTBOOK, ms=4, lw=1.2, label="textbook procedure, step by step")
    ax.plot([s[0] for s in cmap.samples], [s[1] for s in cmap.samples],
            "s", color=style.START, ms=6, label="the three simulated samples the map is built on")
    chosen = r.get("values", {})
    if "cc" in chosen:
        ax.plot([chosen["cc"]], [chosen_rc], "*", color=style.FINAL, ms=16,
                markeredgecolor="white", label=f"chosen: {_values_text(chosen, r)}", zorder=6)
    if rc.size > 1:
        pad = 0.03 * (rc[-1] - rc[0])
        ax.set_ylim(rc[0] - pad, rc[-1] + pad)
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0))
    fig.text(0.72, 0.55, "solid lines: phase margin of this corner\n"
             "dashed lines: its unity-gain frequency\n"
             + ("green: this corner meets the target" if device else
                "green: every corner meets the target"), fontsize=8.5, color=style.MUTED,
             va="top")
    return fig


_POINT_WORDS = {
    "characterise": "sample for the map",
    "verify": "check at the chosen values",
    "start": "textbook: starting Cc",
    "dominant-pole": "textbook: dominant-pole step",
    "lead": "textbook: lead resistor",
    "adjust-cc": "textbook: Cc adjusted",
    "evaluate": "optimiser evaluation",
}


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
    fig = _figure()
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
        colour = style.FINAL if kind == "verify" else (style.TEXTBOOK if kind in
                                                       ("start", "dominant-pole", "lead", "adjust-cc")
                                                       else style.START)
        top.plot([x[i] for i in sel], [pm[i] for i in sel], "o", color=colour,
                 label=_POINT_WORDS.get(kind, kind))
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
    bottom.set_ylabel("worst-corner unity gain")
    bottom.set_yscale("log")
    bottom.yaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
    bottom.yaxis.set_major_formatter(style.hertz)
    bottom.yaxis.set_minor_formatter(plt.NullFormatter())
    bottom.set_xlabel("AC analyses so far")
    top.legend(loc="lower right", title="point", title_fontsize=8)
    plt.setp(top.get_xticklabels(), visible=False)
    return fig


def step_rerun_command(results: dict, out) -> list[str]:
    """The command line that runs the step checks of an out folder: its own command again
    (the same values, for ``measure`` with ``--set``), which takes every AC analysis from
    the journal and simulates only the step transients.

    Parameters
    ----------
    results
        The out folder's results.json, read.
    out
        The out folder.
    """
    command = ["amploop", results.get("command", "measure"), str(results.get("job_file")),
               "--out", str(out)]
    if command[1] == "tune":
        if results.get("strategy", "map") != "map":
            command += ["--strategy", results["strategy"]]
    else:
        for role, value in results.get("values", {}).items():
            command += ["--set", f"{role}={value!r}"]
    return command


def steps_absent_note(data: ReportData) -> list[str]:
    """Lines saying why the step page has no step responses and what to run for them.

    Parameters
    ----------
    data
        The report's data, whose ``steps`` are empty: the failure of the first corner whose
        step check failed, else the command of :func:`step_rerun_command`.
    """
    import shlex

    failed = [(c["name"], c["step"]["error"]) for c in data.results["corners"]
              if c.get("step") and c["step"].get("error")]
    if failed:
        name, error = failed[0]
        return ["No step response to show: the step checks failed.",
                *textwrap.wrap(f"{name}: {error}", 90)]
    command = shlex.join(step_rerun_command(data.results, data.out))
    wrapped = textwrap.wrap(command, 84, break_on_hyphens=False, break_long_words=True)
    return ["The step checks were not run for this out folder",
            "(its run had --no-report, or stopped before them).", "",
            "This command runs them, simulating only the step transients",
            "(every AC analysis comes from the journal), and draws this report again:", "",
            *wrapped]


def time_domain_page(data: ReportData, highlight: list[str] | None = None):
    """The closed-loop small-step response of every corner at the final values, from the
    step responses in ``data``.

    Parameters
    ----------
    data
        The out folder's figures.
    highlight
        None: a curve per corner. Else (many corners) the curves of these corners and
        the limiting one, over the band that all corners' responses span; each corner's
        response is read, added to the band and let go, one at a time.
    """
    fig = _figure()
    fig.text(0.06, 0.95, "Closed-loop step response at the final values", fontsize=13,
             weight="bold")
    names = [n for n in data.corner_names if n in data.steps]
    if not names:
        fig.text(0.06, 0.86, "\n".join(steps_absent_note(data)), fontsize=10, va="top",
                 color=style.LIMIT, family="monospace")
        return fig
    first = data.steps[names[0]]
    band = first.metrics.band
    fig.text(0.06, 0.922, f"Input step {engineering(first.step_v, 'V')} at the signal source; "
             f"output normalised to its step. Settling band ±{band:.1%}.",
             fontsize=8.5, color=style.MUTED)
    full = fig.add_axes((0.08, 0.54, 0.64, 0.34))
    zoom = fig.add_axes((0.08, 0.1, 0.64, 0.34), sharex=full)
    limiting = data.limiting_corner
    drawn = names if highlight is None else [n for n in names if n in set(highlight) | {limiting}]
    envelope = None if highlight is None else StepEnvelope(first.stop_s)
    figures = {}  # corner -> its metrics (the arrays are let go)
    for name in names:
        check = data.steps[name]
        m = check.metrics
        figures[name] = m
        t = check.time_s - check.step_at_s
        y = (check.output_v - m.initial_v) / (m.final_v - m.initial_v)
        if envelope is not None:
            envelope.add(t, y)
        if name not in drawn:
            continue
        is_limiting = name == limiting
        colour = style.LIMIT if is_limiting else style.corner_colour(drawn.index(name))
        lw = 1.8 if is_limiting else 0.8
        label = name + (" (limiting)" if is_limiting else "") if len(drawn) <= 24 else None
        full.plot(t, y, color=colour, lw=lw, label=label, zorder=5 if is_limiting else 2)
        zoom.plot(t, (y - 1) * 100, color=colour, lw=lw, zorder=5 if is_limiting else 2)
    if envelope is not None:
        envelope.draw(full, zoom, f"all {len(names)} corners (their span)")
    zoom.axhspan(-band * 100, band * 100, color=style.FEASIBLE, zorder=0)
    zoom.set_ylim(-2000 * band, 2000 * band)
    full.set_ylabel("output / output step")
    zoom.set_ylabel("error (% of the step)")
    zoom.set_xlabel("time after the step")
    zoom.xaxis.set_major_formatter(style.seconds)
    settled = [m.settling_s for m in figures.values()]
    if all(v is not None for v in settled):
        full.set_xlim(-0.02 * first.stop_s, min(first.stop_s, 2.5 * max(settled)))
    else:
        full.set_xlim(left=-0.02 * first.stop_s)
    plt.setp(full.get_xticklabels(), visible=False)
    if len(drawn) <= 24:
        full.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), ncol=1)
    unsettled = [n for n, m in figures.items() if m.settling_s is None]
    if unsettled:
        fig.text(0.74, 0.3, f"not settled to ±{band:.1%} within the run:\n  "
                 + "\n  ".join(unsettled[:12]) + ("\n  …" if len(unsettled) > 12 else ""),
                 fontsize=9, color=style.LIMIT, va="top")
    else:
        worst = max(figures, key=lambda n: figures[n].settling_s)
        wm = figures[worst]
        fig.text(0.74, 0.3, f"slowest to settle: {worst}\n"
                 f"  {_fmt(wm.settling_s, '', 's')} to ±{wm.band:.1%}, overshoot "
                 f"{wm.overshoot_pct:.2f} %", fontsize=9)
    return fig
