"""The step-response page: every corner's closed-loop step at the final values, the
settling band, the slowest corner; and the note when the step was not simulated."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt

from amploop.report import style
from amploop.report.data import ReportData
from amploop.report.overview import StepEnvelope
from amploop.report.pages import new_page, shown_value
from amploop.spice.units import engineering


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
    fig = new_page()
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
                 f"  {shown_value(wm.settling_s, '', 's')} to ±{wm.band:.1%}, overshoot "
                 f"{wm.overshoot_pct:.2f} %", fontsize=9)
    return fig
