"""What the terminal shows: the corner table, remarks on suspect corners, the chosen
values, and the words of tune's progress line (the live displays are in
:mod:`amploop.cli.progress`). Printing only; no decisions."""

from __future__ import annotations

import sys

from amploop.spice.labels import COMMON_MODE_LABELS, FIGURE_LABELS
from amploop.spice.units import describe_values, engineering


def _table(rows: list[list[str]], header: list[str]) -> str:
    """``rows`` under ``header``, whose headings may wrap at a line break; the first column
    left-aligned, the others right-aligned."""
    parts = [h.split("\n") for h in header]
    depth = max(len(p) for p in parts)
    parts = [[""] * (depth - len(p)) + p for p in parts]  # headings sit on the rule
    widths = [max(*(len(x) for x in parts[i]), *(len(r[i]) for r in rows))
              for i in range(len(header))]
    lines = ["  ".join((p[k].ljust(w) if i == 0 else p[k].rjust(w))
                       for i, (p, w) in enumerate(zip(parts, widths))).rstrip()
             for k in range(depth)]
    lines.append("  ".join("-" * w for w in widths))
    for row in rows:
        lines.append("  ".join(c.ljust(w) if i == 0 else c.rjust(w)
                               for i, (c, w) in enumerate(zip(row, widths))))
    return "\n".join(lines)


def _figure(value, fmt: str) -> str:
    return "–" if value is None else format(value, fmt)


def _corner_note(corner, target) -> str:
    """``ok``, ``SUSPECT``, ``ERROR``, or what the corner misses of ``target`` (``GM 9.9956
    dB < 10 dB``); followed by ``gmin`` where its operating point needed gmin stepping."""
    from amploop.bench.oppoint import status_label

    label = status_label(corner.status, corner.warnings)
    if corner.status == "ok" and target is not None:
        from amploop.strategy.worst import corner_shortfall

        missed = corner_shortfall(corner, target)
        if missed:
            return missed + label[len("ok"):]
    return label


_TABLE_FIGURES = ("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db",
                  "phase_crossover_hz")


def corner_table(corners, target=None) -> str:
    """The per-corner table printed by ``measure`` (and by ``tune`` at the end, where a
    corner that misses the ``target`` says which margin and by how much)."""
    common_mode = any(c.measures_common_mode for c in corners)
    header = ["corner", *(FIGURE_LABELS[k] for k in _TABLE_FIGURES)]
    if common_mode:  # a fully-differential amplifier's second loop
        header += [COMMON_MODE_LABELS[k] for k in _COMMON_MODE_FIGURES]
    header += ["out - CM", "note"]
    rows = []
    for c in corners:
        m = c.margins
        op = c.operating_point
        row = [
            c.corner.name,
            _figure(m and m.dc_loop_gain_db, ".1f"),
            engineering(m and m.unity_gain_hz, "Hz"),
            _figure(m and m.phase_margin_deg, ".2f"),
            _figure(m and m.gain_margin_db, ".2f"),
            engineering(m and m.phase_crossover_hz, "Hz"),
        ]
        if common_mode:
            cm = c.common_mode
            row += [engineering(cm and cm.unity_gain_hz, "Hz"),
                    _figure(cm and cm.phase_margin_deg, ".2f"),
                    _figure(cm and cm.gain_margin_db, ".2f")]
        rows.append(row + [engineering(op and op.output_shift_v, "V"), _corner_note(c, target)])
    return _table(rows, header)


_COMMON_MODE_FIGURES = ("unity_gain_hz", "phase_margin_deg", "gain_margin_db")


_SUSPECT_LINES = 5  # suspect corners named one by one; the rest are counted


def print_corner_remarks(corners) -> None:
    """On stderr: each suspect corner's reason, then each simulator warning once with the
    corners it hit and what it means."""
    from amploop.bench.oppoint import warning_advice

    suspect = [c for c in corners if c.status == "suspect"]
    for c in suspect[:_SUSPECT_LINES]:
        print(f"amploop: suspect: corner {c.corner.name}: {c.suspect_reason}", file=sys.stderr)
    if len(suspect) > _SUSPECT_LINES:
        print(f"amploop: suspect: {len(suspect) - _SUSPECT_LINES} more corners (each one's "
              "reason is in results.json)", file=sys.stderr)
    by_warning: dict[str, list[str]] = {}
    for c in corners:
        for warning in c.warnings:
            by_warning.setdefault(warning, []).append(c.corner.name)
    for warning, names in by_warning.items():
        advice = warning_advice(warning)
        print(f"amploop: warning: {warning} ({_who(names, len(corners))})"
              + (f": {advice}" if advice else ""), file=sys.stderr)


def values_line(job, values: dict) -> str:
    """``Cc = 292.8 fF, Rc = 20 kΩ``, or the device's size when one stands in for Rc."""
    knob = job.compensation.get("rc")
    device = (knob.name, knob.size) if knob is not None and knob.where == "device" else None
    return describe_values(values, device=device)


def _who(names: list[str], total: int) -> str:
    """``corner a``, ``corners a, b``, ``corners a, b, c and 4 more``, ``all 9 corners``."""
    if len(names) == total and total > 1:
        return f"all {total} corners"
    if len(names) > 3:
        return f"corners {', '.join(names[:3])} and {len(names) - 3} more"
    return ("corner " if len(names) == 1 else "corners ") + ", ".join(names)


def print_corner_errors(failed, total: int) -> None:
    """One line per distinct problem, naming the corners it hit."""
    by_problem: dict[str, list[str]] = {}
    for c in failed:
        by_problem.setdefault(c.error or "failed", []).append(c.corner.name)
    for problem, names in by_problem.items():
        print(f"amploop: error: {problem} ({_who(names, total)})", file=sys.stderr)


TUNE_PROGRESS_KEY = ("  each point: worst-corner phase margin at worst-corner unity-gain frequency; "
                     "best: the point so far that meets the target with the most bandwidth")


def tune_progress_line(entry, best: dict, target) -> str:
    """The tune progress line after history entry ``entry`` (read with
    :data:`TUNE_PROGRESS_KEY`): the running answer first, the point so far that meets
    ``target`` with the most worst-corner bandwidth (kept in ``best``, updated here; the
    report's samples do not count), then what this point gave."""
    from amploop.strategy.kinds import kind_label
    from amploop.strategy.worst import meets_target

    w = entry.worst
    if w is not None and entry.kind != "report-map" and meets_target(w, target) \
            and (not best or w.unity_gain_hz > best["ugf"]):
        best.update(ugf=w.unity_gain_hz, pm=w.phase_margin_deg, step=entry.step)
    answer = "none yet" if not best else \
        f"{best['pm']:.2f}° at {engineering(best['ugf'], 'Hz')} (step {best['step']})"
    this = "a corner did not measure" if w is None else \
        f"{w.phase_margin_deg:.2f}° at {engineering(w.unity_gain_hz, 'Hz')}"
    return (f"best ≥ {target.phase_margin_deg:g}°: {answer} | step {entry.step} {kind_label(entry.kind)}: "
            f"{this} | {entry.ac_analyses} AC")
