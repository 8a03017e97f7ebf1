"""The summary pages: the job, the target, the chosen values and one table row per
corner (DC loop gain, unity-gain frequency, margins, the common-mode loop's of a
fully-differential amplifier, step figures, status), the limiting corner marked (and the
loop that limits); notes on corners that are not ok."""

from __future__ import annotations

import math
import textwrap

from amploop.bench.oppoint import status_label, warning_advice
from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.pages import footer, new_page, shown_value, values_text
from amploop.spice.labels import COMMON_MODE, COMMON_MODE_LABELS, FIGURE_LABELS
from amploop.spice.units import engineering

#: Table rows on the first summary page, and on each page after it.
ROWS_FIRST, ROWS_MORE = 18, 34


#: The mark of the limiting corner, and of a fully-differential amplifier's by its loop.
_MARKS = {None: " ◀ limiting", "differential": " ◀ limiting (diff.)",
          "common_mode": " ◀ limiting (CM)"}
#: The common-mode loop's columns, after the differential loop's margins.
_CM_COLUMNS = (("unity_gain_hz", "", "Hz"), ("phase_margin_deg", ".2f", ""),
               ("gain_margin_db", ".1f", ""))


def _corner_rows(data: ReportData) -> list[list[str]]:
    limiting = data.limiting_corner
    mark = _MARKS[data.limiting_loop]
    rows = []
    for c in data.results["corners"]:
        cm = c.get(COMMON_MODE) or {}
        rows.append([
            c["name"] + (mark if c["name"] == limiting else ""),
            shown_value(c.get("dc_loop_gain_db"), ".1f"),
            shown_value(c.get("unity_gain_hz"), "", "Hz"),
            shown_value(c.get("phase_margin_deg"), ".2f"),
            shown_value(c.get("gain_margin_db"), ".1f"),
            *([shown_value(cm.get(k), spec, unit) for k, spec, unit in _CM_COLUMNS]
              if data.common_mode else []),
            shown_value(c.get("overshoot_pct"), ".2f"),
            shown_value(c.get("settling_time_s"), "", "s"),
            status_label(c.get("status", "error"), c.get("warnings", ())),
        ])
    return rows


def _header(common_mode: bool) -> list[str]:
    """The table's column headings, with the common-mode loop's when ``common_mode``."""
    return ["corner", *(FIGURE_LABELS[k] for k in ("dc_loop_gain_db", "unity_gain_hz",
            "phase_margin_deg", "gain_margin_db")),
            *((COMMON_MODE_LABELS[k] for k, _, _ in _CM_COLUMNS) if common_mode else ()),
            *(FIGURE_LABELS[k] for k in ("overshoot_pct", "settling_time_s")), "status"]


def _configuration_bands(corners: list[dict]) -> list[bool]:
    """Per corner row: whether it sits in a shaded band, the bands alternating with each
    configuration of a multi-configuration job (their rows come configuration by
    configuration); no band anywhere for a single configuration."""
    bands, shaded, previous = [], False, None
    for c in corners:
        configuration = c.get("configuration")
        if configuration != previous and previous is not None:
            shaded = not shaded
        bands.append(shaded)
        previous = configuration
    return bands


def _configuration_line(corners: list[dict]) -> str | None:
    """The header line naming each configuration and its rows (None with one)."""
    spans: dict[str, list[int]] = {}
    for i, c in enumerate(corners, start=1):
        if c.get("configuration") is not None:
            spans.setdefault(c["configuration"], []).append(i)
    if not spans:
        return None
    return ("Configurations (rows grouped and shaded in turn): " + ", ".join(
        f"{name} (rows {rows[0]}–{rows[-1]})" for name, rows in spans.items()))


def _table(ax, rows: list[list[str]], limiting_rows: set[int], common_mode: bool,
           bands: list[bool] | None = None) -> None:
    ax.axis("off")
    header = _header(common_mode)
    if common_mode:  # eleven columns: narrower, the headings over three lines
        widths = [0.23] + [0.075] * 9 + [0.07]
        header = [textwrap.fill(h.replace("\n", " "), 10) for h in header]
    else:
        widths = [0.26, 0.1, 0.1, 0.1, 0.1, 0.1, 0.1, 0.07]
    table = ax.table(cellText=rows, colLabels=header, loc="upper center",
                     cellLoc="right", colLoc="right", colWidths=widths)
    table.auto_set_font_size(False)
    table.set_fontsize(8)
    table.scale(1, 1.25)
    for (row, col), cell in table.get_celld().items():
        if row == 0:
            cell.set_height(cell.get_height() * (2.6 if common_mode else 1.9))
        cell.set_edgecolor("#cccccc")
        cell.set_linewidth(0.4)
        if col == 0:
            cell.set_text_props(ha="left")
            cell._loc = "left"
        if row == 0:
            cell.set_text_props(weight="bold", color="#333333")
            cell.set_facecolor("#f0f0f0")
        elif bands and bands[row - 1]:
            cell.set_facecolor(style.BAND)
        if row > 0 and rows[row - 1][-1].startswith("SUSPECT"):
            cell.set_text_props(color=style.SUSPECT, weight="bold" if row - 1 in limiting_rows
                                else "normal")
        elif row > 0 and row - 1 in limiting_rows:
            cell.set_text_props(color=style.LIMIT, weight="bold")
        elif row > 0 and rows[row - 1][-1].startswith("ERROR"):
            cell.set_text_props(color=style.LIMIT)


def summary_page_count(corners: int) -> int:
    """How many pages :func:`summary_pages` draws for ``corners`` corners."""
    return 1 + max(0, -(-(corners - ROWS_FIRST) // ROWS_MORE))


def summary_pages(data: ReportData, date: str):
    """Page 1 (and continuation pages of the corner table for long corner lists), one
    figure at a time (a generator: the caller closes each before the next is drawn).

    Parameters
    ----------
    data
        The out folder's figures.
    date
        The date and time shown under the title.
    """
    r = data.results
    rows = _corner_rows(data)
    limiting = {i for i, c in enumerate(r["corners"]) if c["name"] == data.limiting_corner}
    fig = new_page()
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
                     f"(within +{t['tolerance_deg']:g}°){gm}" + _common_mode_target(t))
        lines.append(_objective_line(t))
        lines += [line for line in (settling_line(r),) if line]
        lines.append(f"Chosen: {values_text(r['values'], r)}")
        if r.get("message"):
            lines.append(r["message"])
    else:
        lines.append(f"Values in effect: {values_text(r['values'], r)}")
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
    lines += [line for line in (_configuration_line(r["corners"]),) if line]
    lines += _status_notes(r["corners"])
    lines += statistics_lines(r)
    y = 0.86
    for line in lines:
        for part in textwrap.wrap(line, 150):
            fig.text(0.05, y, part, fontsize=9.5)
            y -= 0.028
    first = rows[:ROWS_FIRST]
    ax = fig.add_axes((0.05, 0.12, 0.9, y - 0.14))
    bands = _configuration_bands(r["corners"])
    _table(ax, first, {i for i in limiting if i < ROWS_FIRST}, data.common_mode,
           bands[:ROWS_FIRST])
    if len(rows) > ROWS_FIRST:
        fig.text(0.05, 0.1, f"… table continues: {len(rows) - ROWS_FIRST} more corners on the "
                 "next page(s)", fontsize=8, color=style.MUTED)
    footer(fig)
    yield fig
    for start in range(ROWS_FIRST, len(rows), ROWS_MORE):
        fig = new_page()
        fig.text(0.05, 0.94, f"Corners {start + 1}–{min(start + ROWS_MORE, len(rows))} of "
                 f"{len(rows)}", fontsize=13, weight="bold")
        ax = fig.add_axes((0.05, 0.1, 0.9, 0.8))
        chunk = rows[start:start + ROWS_MORE]
        _table(ax, chunk, {i - start for i in limiting if start <= i < start + ROWS_MORE},
               data.common_mode, bands[start:start + ROWS_MORE])
        footer(fig)
        yield fig


def statistics_lines(results: dict) -> list[str]:
    """One line per base corner with Monte Carlo samples (results.json's ``statistics``):
    the phase margin's mean, σ and mean − kσ, and the yield with its 95 % interval."""
    lines = []
    for s in results.get("statistics") or []:
        pm = s.get("phase_margin_deg")
        name = s["base"] + (f"@{s['configuration']}" if s.get("configuration") else "")
        text = f"Monte Carlo {name}: {s['samples']} samples"
        if pm:
            k = s.get("sigma") or 3
            text += (f", PM mean {pm['mean']:.2f}° σ {pm['std']:.2f}° "
                     f"(mean − {k:g}σ {pm['mean'] - k * pm['std']:.2f}°), min {pm['min']:.2f}°")
        if s.get("yield") is not None:
            low, high = s["yield_interval_95"]
            text += (f"; {s['meeting_target']} meet the target, yield {s['yield']:.3f} "
                     f"[{low:.3f}, {high:.3f}] at 95 %")
        lines.append(text)
    return lines


def _common_mode_target(target: dict) -> str:
    """The common-mode loop's part of the Target line (empty when it has no target)."""
    cm_pm = target.get("common_mode_phase_margin_deg")
    cm_gm = target.get("common_mode_gain_margin_db")
    parts = ([f"phase margin ≥ {cm_pm:g}°"] if cm_pm is not None else []) + (
        [f"gain margin ≥ {cm_gm:g} dB"] if cm_gm is not None else [])
    return f"; common-mode loop: worst-corner {', '.join(parts)}" if parts else ""


def _objective_line(target: dict) -> str:
    """The Objective line: what was optimised at the margins, and the settling ceiling."""
    if target.get("objective") == "settling":
        text = ("Objective: the shortest worst-corner small-signal settling time (predicted "
                "on the maps, verified by the step transients)")
    else:
        text = "Objective: the widest worst-corner unity-gain frequency"
    ceiling = target.get("settling_time_s")
    return text + (f"; every corner settles within {engineering(ceiling, 's')}"
                   if ceiling is not None else "")


def settling_line(results: dict) -> str:
    """The worst-corner settling time at the chosen point, simulated (the step transients)
    and predicted (the closed-loop maps), from results.json's ``settling_prediction``;
    empty without it (a tune that did not ask for settling)."""
    agreement = results.get("settling_prediction") or {}
    if not agreement:
        return ""

    def worst(key: str) -> str:
        times = {n: a[key] for n, a in agreement.items()}
        name = max(times, key=lambda n: math.inf if times[n] is None else times[n])
        shown = "not settled in its run" if times[name] is None else engineering(times[name], "s")
        return f"{shown} (corner {name})"

    return (f"Settling: worst-corner {worst('simulated_s')} simulated (step transients), "
            f"{worst('predicted_s')} predicted (closed-loop maps)")


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


def corner_status_lines(corner: dict) -> list[str]:
    """The corner page's lines on its status, operating point and simulator warnings."""
    lines = []
    if corner.get("status") == "suspect":
        lines.append(f"SUSPECT: {corner.get('suspect_reason')}")
    op = corner.get("operating_point")
    if op:
        shift = op.get("output_shift_v")
        lines.append(f"DC output {shown_value(op.get('output_v'), '', 'V')} against the common mode "
                     f"{shown_value(op.get('common_mode_v'), '', 'V')}"
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
