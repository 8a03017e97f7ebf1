"""Everything the report draws, rebuilt from results.json and the journal (no simulation).

results.json names, for every simulated point and corner, the journal key of its
analysis; the journal holds the vectors. The loop gains, the compensation maps and the
step responses are recomputed from those with the same pure functions the run used.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Self

import numpy as np

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.loopgain import FrequencyResponse
from amploop.bench.loops import readout_for
from amploop.corners.results import SCHEMA
from amploop.corners.stepcheck import StepCheck, check_from_output
from amploop.errors import JobError, JournalError, OutputError
from amploop.report.lazy import LazyFigures
from amploop.sim.journal import Journal
from amploop.spec.model import Target
from amploop.spice.labels import COMMON_MODE, JOURNAL_KEY, JOURNAL_KEYS, PHASE_MARGIN_CORNER
from amploop.spice.units import describe_values
from amploop.strategy.kinds import kind_label
from amploop.strategy.worst import WorstCase, limiting_loop

__all__ = ["Curve", "LazyFigures", "ReportData", "load_report_data", "needs_settling"]


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

    The per-corner figures (``curves``, ``finals``, ``steps``, ``maps`` and a
    fully-differential amplifier's ``cm_finals``, ``cm_maps``, and a settling tune's
    ``cl_maps``) are read from
    the journal when a page asks for them (:class:`LazyFigures`); :meth:`close` closes
    the journal.

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
    cm_finals, cm_maps
        The same of the common-mode loop of a fully-differential amplifier (empty when
        that loop is not measured).
    cl_maps
        Corner name -> the compensation map of its closed-loop response (signal source to
        output) from the same samples, for a tune that asked for settling (its
        characterisations ran that response too); empty otherwise.
    analyses_read
        How many analyses were read from the journal.
    journal
        The journal, open read-only until :meth:`close`; None once closed (or for data
        built without one).
    """

    out: Path
    results: dict
    corner_names: list[str]
    curves: Mapping[str, list[Curve]] = field(default_factory=dict)
    finals: Mapping[str, FrequencyResponse] = field(default_factory=dict)
    steps: Mapping[str, StepCheck] = field(default_factory=dict)
    maps: Mapping[str, CompensationMap] = field(default_factory=dict)
    cm_finals: Mapping[str, FrequencyResponse] = field(default_factory=dict)
    cm_maps: Mapping[str, CompensationMap] = field(default_factory=dict)
    cl_maps: Mapping[str, CompensationMap] = field(default_factory=dict)
    analyses_read: int = 0
    journal: Journal | None = field(default=None, repr=False)
    _by_name: dict = field(default_factory=dict, init=False, repr=False)

    @property
    def command(self) -> str:
        return self.results.get("command", "measure")

    @property
    def common_mode(self) -> bool:
        """Whether the run measured a fully-differential amplifier's common-mode loop."""
        return COMMON_MODE in (self.results.get("loops") or ())

    @property
    def limiting_loop(self) -> str | None:
        """Which loop limits a fully-differential amplifier whose common-mode loop was
        measured: ``"common_mode"`` when its phase margin has less slack over its target
        than the differential loop's over the main target (the smaller phase margin,
        without targets), else ``"differential"``; None for one loop, or when no corner
        measured."""
        worst = self._worst()
        if worst is None or worst.common_mode is None:
            return None
        target = self.results.get("target")
        limits = limiting_loop(worst, Target(**target) if target else None)
        return "common_mode" if limits == "common_mode" else "differential"

    @property
    def limiting_corner(self) -> str | None:
        """The corner with the smallest phase margin (results.json's
        ``worst.phase_margin_corner`` after tune) of the limiting loop, None when no corner
        measured."""
        worst = self._worst()
        if worst is None:
            return None
        if self.limiting_loop == "common_mode":
            return worst.common_mode.phase_margin_corner
        return worst.phase_margin_corner

    def _worst(self) -> WorstCase | None:
        """results.json's ``worst`` (else the worst phase margin over the corners that
        measured: a measure run, a point where a corner failed); None when none measured."""
        block = self.results.get("worst")
        if block and block.get(PHASE_MARGIN_CORNER):
            cm = block.get(COMMON_MODE)
            return WorstCase(**{**block, COMMON_MODE: cm and WorstCase(**cm)})
        corners = self.results["corners"]
        main = _smallest_margin(corners)
        if main is None:
            return None
        cm = _smallest_margin([{**(c.get(COMMON_MODE) or {}), "name": c["name"]}
                               for c in corners]) if self.common_mode else None
        return WorstCase(**main, common_mode=cm and WorstCase(**cm))

    def corner(self, name: str) -> dict:
        """The entry of corner ``name`` in results.json."""
        if not self._by_name:
            self._by_name = {c["name"]: c for c in self.results["corners"]}
        return self._by_name[name]

    def device_corner(self, name: str) -> dict | None:
        """The record of corner ``name`` in results.json's ``device.corners`` (the device
        standing in for Rc); None without a device or a record."""
        device = self.results.get("device") or {}
        return next((c for c in device.get("corners", []) if c["name"] == name), None)

    def close(self) -> None:
        """Close the journal (the figures not yet read can no longer be)."""
        if self.journal is not None:
            self.journal.close()
            self.journal = None

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _smallest_margin(corners: list[dict]) -> dict | None:
    """The figures of the corner with the smallest phase margin among ``corners``, as
    WorstCase's arguments (the report reads only the corner and the phase margin)."""
    ok = [c for c in corners if c.get("phase_margin_deg") is not None]
    if not ok:
        return None
    c = min(ok, key=lambda c: c["phase_margin_deg"])
    return {"phase_margin_deg": c["phase_margin_deg"], "unity_gain_hz": c.get("unity_gain_hz"),
            "gain_margin_db": c.get("gain_margin_db"), PHASE_MARGIN_CORNER: c["name"],
            "unity_gain_corner": c["name"]}


def needs_settling(results: dict) -> bool:
    """Whether the tune of ``results`` (results.json) asked for settling: ``objective =
    "settling"`` or a ``settling_time`` ceiling in its target."""
    target = results.get("target") or {}
    return target.get("objective") == "settling" or target.get("settling_time_s") is not None


def load_report_data(out: str | Path) -> ReportData:
    """Open an out folder written by ``measure`` or ``tune``.

    Parameters
    ----------
    out
        The out folder; results.json is read now, the journal's analyses as the pages ask
        for them (close the returned data, or use it as a context manager); nothing is
        written.

    Raises
    ------
    JobError
        When results.json is missing (not an out folder of amploop's) or of another schema.
    OutputError
        When results.json is unreadable.
    JournalError
        When the journal is missing, or (as a page asks for it) lacks an analysis
        results.json names.
    """
    out = Path(out).resolve()
    try:
        results = json.loads((out / "results.json").read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise JobError("no results.json: not an amploop out folder", file=out) from None
    except (OSError, ValueError) as exc:
        raise OutputError(f"cannot read results.json: {exc}", file=out) from None
    if not isinstance(results, dict) or results.get("schema") != SCHEMA:
        schema = results.get("schema") if isinstance(results, dict) else None
        raise JobError(f"results.json has schema {schema}; this amploop reads schema {SCHEMA}",
                       file=out / "results.json",
                       hint="run the same measure or tune again into this folder: the "
                       "journal makes it quick") from None
    names = [c["name"] for c in results.get("corners", [])]
    data = ReportData(out=out, results=results, corner_names=names,
                      journal=Journal(out / "journal.sqlite", readonly=True))
    figures = _Figures(data)
    data.maps = LazyFigures([n for n in names if figures.map_points(n) is not None],
                            figures.load_map, keep=1)
    data.finals = LazyFigures([n for n in names if figures.final_key(n)],
                              lambda name: figures.loop_gain(figures.final_key(name)))
    if data.common_mode:
        data.cm_maps = LazyFigures(list(data.maps), figures.load_cm_map, keep=1)
        data.cm_finals = LazyFigures(list(data.finals),
                                     lambda name: figures.cm_loop_gain(figures.final_key(name)))
    if figures.closed_loop:
        data.cl_maps = LazyFigures(list(data.maps), figures.load_cl_map, keep=1)
    data.curves = LazyFigures(names, figures.load_curves)
    data.steps = LazyFigures([n for n in names if figures.has_step(n)], figures.load_step)
    return data


class _Figures:
    """How each figure of the report is rebuilt from results.json and the journal of
    ``data`` (a corner at a time, as the pages ask)."""

    def __init__(self, data: ReportData) -> None:
        results = data.results
        self.data = data
        self.readout = readout_for(results.get("probe", "double-injection"),
                                   results.get("loops"))
        self.device = results.get("device")
        self.device_key = (self.device["name"], self.device["size"]) if self.device else None
        history = [h for h in results.get("history", []) if h.get(JOURNAL_KEYS)]
        self.story = [h for h in history if h["kind"] != "report-map"]
        self.final_values = results.get("values", {})
        self.final_step = max((h["step"] for h in self.story if h["values"] == self.final_values),
                              default=None)
        self.final_entry = next((h for h in self.story if h["step"] == self.final_step), None)
        # the maps: the last three characterisation samples of each corner
        self.samples = [h for h in history if h["kind"] in
                        ("characterise", "characterise-ports", "report-map")][-3:]
        # a settling tune's characterisations ran the closed-loop response too
        self.closed_loop = needs_settling(results) and all(
            h["kind"] == "characterise" for h in self.samples)
        self.cl_readout = replace(self.readout, closed_loop=True)
        # the netlist's own values, predicted from the map (no simulation)
        self.start = results.get("values_in_netlist")
        self.predict_start = (bool(self.start) and data.command == "tune"
                              and self.device is None)

    def reads(self, key: str):
        """The vectors of the journal's analysis ``key``."""
        output = self.data.journal.get(key)
        if output is None:
            raise JournalError(f"the journal lacks analysis {key[:12]}… named in results.json",
                               file=self.data.journal.path, hint="rerun the command to rebuild it")
        self.data.analyses_read += 1
        return output.reads

    def loop_gain(self, key: str) -> FrequencyResponse:
        """The loop gain of the journal's analysis ``key`` (a fully-differential
        amplifier's differential loop gain)."""
        return self.readout.loop_gain(self.reads(key))

    def cm_loop_gain(self, key: str) -> FrequencyResponse:
        """The common-mode loop gain of the journal's analysis ``key``."""
        return self.readout.common_mode_loop_gain(self.reads(key))

    def final_key(self, name: str) -> str | None:
        """The journal key of corner ``name``'s loop gain at the final values (None when the
        corner gave no margins)."""
        corner = self.data.corner(name)
        key = (corner.get(JOURNAL_KEY) if self.final_entry is None
               else self.final_entry[JOURNAL_KEYS].get(name))
        return key if key and corner.get("status") in ("ok", "suspect") else None

    def map_points(self, name: str):
        """The samples' (Cc, Rc) as corner ``name`` saw them, or None without a map."""
        samples = self.samples
        if len(samples) < 3 or not all(h[JOURNAL_KEYS].get(name) for h in samples):
            return None
        if self.device is not None:  # the samples' resistance as this corner saw it
            r = (self.data.device_corner(name) or {}).get("sample_resistance_ohm")
            return None if r is None else [(h["values"]["cc"], r) for h in samples]
        return [(h["values"]["cc"], h["values"].get("rc", 0.0)) for h in samples]

    def load_map(self, name: str) -> CompensationMap:
        """Corner ``name``'s compensation map from its three samples."""
        return CompensationMap.from_loop_gains(
            self.map_points(name), [self.loop_gain(h[JOURNAL_KEYS][name]) for h in self.samples])

    def load_cm_map(self, name: str) -> CompensationMap:
        """Corner ``name``'s compensation map of its common-mode loop from its three
        samples."""
        return CompensationMap.from_loop_gains(
            self.map_points(name),
            [self.cm_loop_gain(h[JOURNAL_KEYS][name]) for h in self.samples])

    def load_cl_map(self, name: str) -> CompensationMap:
        """Corner ``name``'s compensation map of its closed-loop response from its three
        samples."""
        return CompensationMap.from_loop_gains(
            self.map_points(name), [self.cl_readout.closed_loop_response(
                self.reads(h[JOURNAL_KEYS][name])) for h in self.samples])

    def load_curves(self, name: str) -> list[Curve]:
        """Corner ``name``'s loop gains for its page: the netlist's values (predicted from
        the map), every step of the tuning, the final values."""
        data, curves = self.data, []
        if self.predict_start and name in data.maps:
            response = data.maps[name].loop_gain(self.start["cc"], self.start.get("rc", 0.0))
            if np.all(np.isfinite(response.values)):
                curves.append(Curve(f"netlist values (from the map): "
                                    f"{describe_values(self.start, self.device_key)}", "start",
                                    response))
        for entry in self.story:
            key = entry[JOURNAL_KEYS].get(name)
            if key is None or entry["step"] == self.final_step:
                continue
            words = kind_label(entry["kind"])
            curves.append(Curve(f"{entry['step']}. {words}: "
                                f"{describe_values(entry['values'], self.device_key)}",
                                "step", self.loop_gain(key)))
        if name in data.finals:
            label = "final" if data.command == "tune" else "as in the netlist"
            curves.append(Curve(f"{label}: {describe_values(self.final_values, self.device_key)}",
                                "final", data.finals[name]))
        return curves

    def load_step(self, name: str) -> StepCheck:
        """Corner ``name``'s closed-loop step response from its transient."""
        step = self.data.corner(name)["step"]
        return check_from_output(name, step[JOURNAL_KEY], step["step_v"], step["step_at_s"],
                                 step["stop_s"], self.reads(step[JOURNAL_KEY]), step["band"])

    def has_step(self, name: str) -> bool:
        """Whether corner ``name`` has a step response to show."""
        step = self.data.corner(name).get("step")
        return bool(step and step.get(JOURNAL_KEY) and step.get("error") is None)
