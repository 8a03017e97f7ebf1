"""Everything the report draws, rebuilt from results.json and the journal (no simulation).

results.json names, for every simulated point and corner, the journal key of its
analysis; the journal holds the vectors. The loop gains, the compensation maps and the
step responses are recomputed from those with the same pure functions the run used.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..compmap import CompensationMap
from ..errors import JournalError, OutputError
from ..journal import Journal
from ..loopgain import FrequencyResponse
from ..probe import make_probe
from ..stepcheck import StepCheck, check_from_output
from ..testbench import NODE_AMP, NODE_FEEDBACK
from ..units import describe_values

__all__ = ["Curve", "ReportData", "load_report_data"]


@dataclass(frozen=True)
class Curve:
    """One loop gain on a corner page: what it is, its values, and how to draw it.

    Attributes
    ----------
    label
        The legend's text: the step and the values.
    kind
        ``"final"`` (the final values; measure: the netlist's), ``"start"`` (the netlist's
        values, predicted from the map) or ``"step"`` (a step of the tuning).
    response
        The loop gain.
    """

    label: str
    kind: str  # "final", "start", "step"
    response: FrequencyResponse


@dataclass
class ReportData:
    """The figures of one out folder, ready to draw.

    Attributes
    ----------
    out
        The out folder (absolute).
    results
        Its results.json as read.
    corner_names
        The corners in the job's order.
    curves
        Corner name -> the loop gains of its page, in drawing order.
    finals
        Corner name -> its loop gain at the final values (corners that measured).
    steps
        Corner name -> its step response (corners whose step check gave figures).
    maps
        Corner name -> its compensation map from the last three map samples of the
        history (empty without them).
    analyses_read
        How many analyses were read from the journal.
    """

    out: Path
    results: dict
    corner_names: list[str]
    curves: dict[str, list[Curve]] = field(default_factory=dict)
    finals: dict[str, FrequencyResponse] = field(default_factory=dict)
    steps: dict[str, StepCheck] = field(default_factory=dict)
    maps: dict[str, CompensationMap] = field(default_factory=dict)
    analyses_read: int = 0

    @property
    def command(self) -> str:
        return self.results.get("command", "measure")

    @property
    def limiting_corner(self) -> str | None:
        if self.results.get("limiting_corner"):
            return self.results["limiting_corner"]
        ok = [c for c in self.results["corners"] if c.get("phase_margin_deg") is not None]
        return min(ok, key=lambda c: c["phase_margin_deg"])["name"] if ok else None

    def corner(self, name: str) -> dict:
        """The entry of corner ``name`` in results.json."""
        return next(c for c in self.results["corners"] if c["name"] == name)


def _values_label(values: dict, device: tuple[str, str] | None = None) -> str:
    return describe_values(values, equals=" ", device=device)


_KIND_WORDS = {
    "characterise": "sample",
    "verify": "check",
    "start": "textbook start",
    "dominant-pole": "dominant-pole step",
    "lead": "lead step",
    "adjust-cc": "Cc adjusted",
    "evaluate": "optimiser try",
}


def load_report_data(out: str | Path) -> ReportData:
    """Read an out folder written by ``measure`` or ``tune``.

    Parameters
    ----------
    out
        The out folder; results.json and the journal are read, nothing is written.

    Raises
    ------
    OutputError
        When results.json is missing or unreadable.
    JournalError
        When the journal is missing, or lacks an analysis results.json names.
    """
    out = Path(out).resolve()
    try:
        results = json.loads((out / "results.json").read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise OutputError("no results.json: not an amploop out folder", file=out) from None
    except (OSError, ValueError) as exc:
        raise OutputError(f"cannot read results.json: {exc}", file=out) from None
    probe = make_probe(results.get("probe", "double-injection"))
    device = results.get("device")
    device_key = (device["name"], device["size"]) if device else None
    names = [c["name"] for c in results.get("corners", [])]
    data = ReportData(out=out, results=results, corner_names=names)
    with Journal(out / "journal.sqlite", readonly=True) as journal:

        def reads(key: str):
            output = journal.get(key)
            if output is None:
                raise JournalError(f"the journal lacks analysis {key[:12]}… named in results.json",
                                   file=journal.path, hint="rerun the command to rebuild it")
            data.analyses_read += 1
            return output.reads

        def loop_gain(key: str) -> FrequencyResponse:
            return probe.loop_gain(reads(key), NODE_AMP, NODE_FEEDBACK)

        history = [h for h in results.get("history", []) if h.get("analyses")]
        story = [h for h in history if h["kind"] != "report-map"]
        final_values = results.get("values", {})
        final_step = max((h["step"] for h in story if h["values"] == final_values), default=None)
        for name in names:
            curves = []
            for entry in story:
                key = entry["analyses"].get(name)
                if key is None or entry["step"] == final_step:
                    continue
                words = _KIND_WORDS.get(entry["kind"], entry["kind"])
                curves.append(Curve(f"{entry['step']}. {words}: {_values_label(entry['values'], device_key)}",
                                    "step", loop_gain(key)))
            corner = data.corner(name)
            final_key = corner.get("analysis")
            if final_step is not None:
                final_key = next(h for h in story if h["step"] == final_step)["analyses"].get(name)
            if final_key and corner.get("status") in ("ok", "suspect"):
                final = loop_gain(final_key)
                data.finals[name] = final
                label = "final" if data.command == "tune" else "as in the netlist"
                curves.append(Curve(f"{label}: {_values_label(final_values, device_key)}", "final",
                                    final))
            data.curves[name] = curves
            step = corner.get("step")
            if step and step.get("analysis") and step.get("error") is None:
                data.steps[name] = check_from_output(
                    name, step["analysis"], step["step_v"], step["step_at_s"], step["stop_s"],
                    reads(step["analysis"]), step["band"])
        # the maps: the last three characterisation samples of each corner
        samples = [h for h in history if h["kind"] in ("characterise", "report-map")][-3:]
        if len(samples) == 3:
            for name in names:
                if device is not None:  # the samples' resistance as this corner saw it
                    r = device.get("sample_resistance_ohm", {}).get(name)
                    if r is None:
                        continue
                    points = [(h["values"]["cc"], r) for h in samples]
                else:
                    points = [(h["values"]["cc"], h["values"].get("rc", 0.0)) for h in samples]
                keys = [h["analyses"].get(name) for h in samples]
                if all(keys):
                    data.maps[name] = CompensationMap.from_loop_gains(
                        points, [loop_gain(k) for k in keys])
        # the netlist's own values, predicted from the map (no simulation)
        start = results.get("values_in_netlist")
        if start and data.maps and data.command == "tune" and device is None:
            for name, cmap in data.maps.items():
                response = cmap.loop_gain(start["cc"], start.get("rc", 0.0))
                if np.all(np.isfinite(response.values)):
                    data.curves[name].insert(0, Curve(
                        f"netlist values (from the map): {_values_label(start, device_key)}", "start",
                        response))
    return data
