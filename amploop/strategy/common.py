"""What every tuning strategy shares: simulating points at all corners, worst cases, history.

A *point* is a set of compensation values by role (``{"cc": 1.2e-12, "rc": 900.0}``).
The :class:`Evaluator` simulates points at every corner through the runner (so every
analysis is journalled and counted), and records each simulated point in the history.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from amploop.analysis.loopgain import FrequencyResponse
from amploop.bench.amplifier import Amplifier
from amploop.bench.requests import AnalysisOutput, Step
from amploop.bench.testbench import build_testbench
from amploop.corners.measure import result_from_output
from amploop.corners.results import CornerResult
from amploop.errors import SimulatorError
from amploop.sim.runner import Runner
from amploop.spec.model import Corner, Knob
from amploop.spice.labels import (
    JOURNAL_KEYS,
    WORST_PHASE_MARGIN_CORNER,
)
from amploop.strategy.kinds import kind_label
from amploop.strategy.worst import WorstCase, worst_case

__all__ = ["Evaluator", "HistoryEntry", "Outcome", "PointResult", "bounds_of", "gm_quantity",
           "not_simulated"]


@dataclass(frozen=True)
class PointResult:
    """One point simulated at every corner.

    Attributes
    ----------
    values
        The compensation values in effect by role, SI.
    corners
        One result per corner, in the evaluator's corner order.
    """

    values: dict[str, float]
    corners: tuple[CornerResult, ...]

    @property
    def worst(self) -> WorstCase | None:
        return worst_case(self.corners)

    @property
    def errors(self) -> list[CornerResult]:
        return [c for c in self.corners if c.status != "ok"]


@dataclass(frozen=True)
class HistoryEntry:
    """One simulated point in the story of a tuning run.

    Attributes
    ----------
    step
        Its number in the history, from 1.
    kind
        What it was simulated for: ``"characterise"``, ``"verify"``, ``"start"``,
        ``"dominant-pole"``, ``"lead"``, ``"adjust-cc"``, ``"evaluate"`` or
        ``"report-map"`` (samples for the report only).
    values
        The compensation values in effect by role, SI.
    worst
        Its worst-corner figures; None when a corner did not measure.
    ac_analyses
        AC analyses (run and reused) so far, this point included.
    note
        A remark, such as the round it belongs to.
    analyses
        Corner name -> journal key of its analysis.
    """

    step: int
    kind: str
    values: dict[str, float]
    worst: WorstCase | None
    ac_analyses: int  # AC analyses (run + reused) so far, this point included
    note: str = ""
    analyses: dict[str, str] = field(default_factory=dict)  # corner -> journal key

    def as_json(self) -> dict:
        """The entry's record in the ``history`` of results.json."""
        w = self.worst
        return {
            "step": self.step,
            "kind": self.kind,
            "label": kind_label(self.kind),
            "values": dict(self.values),
            "worst_phase_margin_deg": w and w.phase_margin_deg,
            "worst_unity_gain_hz": w and w.unity_gain_hz,
            "worst_gain_margin_db": w and w.gain_margin_db,
            WORST_PHASE_MARGIN_CORNER: w and w.phase_margin_corner,
            "ac_analyses": self.ac_analyses,
            "note": self.note,
            JOURNAL_KEYS: dict(self.analyses),
        }


@dataclass(frozen=True)
class Outcome:
    """What a strategy returns.

    ``status`` is ``"converged"``, ``"infeasible"`` or ``"failed"``; ``final`` is the
    verified (simulated) point the status is about; ``message`` explains in one sentence.

    Attributes
    ----------
    status
        ``"converged"``, ``"infeasible"`` or ``"failed"``.
    values
        The chosen compensation values by role, SI.
    final
        The verified point at those values; None when there is none.
    message
        One sentence on the result.
    extra
        What the strategy adds for results.json (the map's predictions and rounds; the
        device's figures per corner under ``"device"``).
    """

    status: str
    values: dict[str, float]
    final: PointResult | None
    message: str
    extra: dict = field(default_factory=dict)


def not_simulated(point: PointResult, values: dict[str, float] | None = None) -> Outcome:
    """The "failed" outcome of a point with a corner that did not simulate or is suspect
    (its operating point broken: tuning on it would mean nothing).

    Parameters
    ----------
    point
        The simulated point; its first corner error is the one reported.
    values
        The values to report, by role, SI; None for the point's own.
    """
    first = point.errors[0]
    if first.status == "suspect":
        what = f"corner {first.corner.name} is suspect: " \
            f"{first.suspect_reason}"
    else:
        what = f"corner {first.corner.name} did not simulate: {first.error}"
    return Outcome("failed", point.values if values is None else values, point, what)


def gm_quantity(device: str) -> str:
    """ngspice's name of the operating-point gm of MOSFET ``device`` inside the amplifier
    instance X1."""
    return f"@m.x1.{device.lower()}[gm]"


def bounds_of(knob: Knob | None, fallback: float) -> tuple[float, float]:
    """(min, max) of ``knob``, SI; a bound it lacks is ``fallback``, and so are both when
    ``knob`` is None."""
    if knob is None:
        return fallback, fallback
    low = knob.minimum if knob.minimum is not None else fallback
    high = knob.maximum if knob.maximum is not None else fallback
    return low, high


class Evaluator:
    """Simulates compensation points at every corner, through the journal.

    Parameters
    ----------
    amplifier
        The prepared amplifier.
    corners
        The corners to simulate at.
    runner
        Runs analyses through the journal and the worker pool.
    time_limit_s
        Per-analysis time limit.
    """

    def __init__(self, amplifier: Amplifier, corners: tuple[Corner, ...], runner: Runner,
                 time_limit_s: float) -> None:
        self.amplifier = amplifier
        self.corners = corners
        self.runner = runner
        self.time_limit_s = time_limit_s
        self.history: list[HistoryEntry] = []
        self.loop_gains: dict[tuple[int, str], FrequencyResponse] = {}
        self.progress = None  # callable(history_entry) or None

    @property
    def ac_analyses(self) -> int:
        return self.runner.ac_run + self.runner.ac_reused

    def full_values(self, values: dict[str, float]) -> dict[str, float]:
        """The compensation values in effect with ``values`` (by role, SI) applied."""
        return self.amplifier.values_in_effect(values)

    def simulate(self, points: list[dict[str, float]], kind: str, note: str = "",
                 closed_loop: bool = False) -> list[PointResult]:
        """Simulate every point at every corner in one parallel batch; record history.

        Parameters
        ----------
        points
            Compensation values by role, SI; roles left out keep the netlist's value.
        kind
            What the points are for, recorded in their history entries
            (:attr:`HistoryEntry.kind`).
        note
            A remark recorded with each of them.
        closed_loop
            Also run each corner's closed-loop response (its
            :attr:`~amploop.corners.results.CornerResult.closed_loop`), for settling.

        Returns
        -------
        list of PointResult
            One per point, in order.
        """
        points = [self.full_values(p) for p in points]
        benches = {}
        for i, values in enumerate(points):
            for corner in self.corners:
                label = f"{corner.name} @ " + " ".join(f"{k}={v:.4g}" for k, v in values.items())
                benches[(i, corner.name)] = build_testbench(self.amplifier, corner, values,
                                                            label=label, closed_loop=closed_loop)
        results: dict[tuple[int, str], CornerResult] = {}
        before = self.ac_analyses
        requests = [(key, b.request(self.time_limit_s)) for key, b in benches.items()]
        requests_by_key = dict(requests)
        for key, output, _ in self.runner.run(requests):
            results[key] = result_from_output(benches[key], output, self.amplifier)
        out = []
        per_point = (self.ac_analyses - before) / max(len(points), 1)
        for i, values in enumerate(points):
            corners = tuple(results[(i, c.name)] for c in self.corners)
            point = PointResult(values=values, corners=corners)
            out.append(point)
            keys = {c.name: self.runner.key_of(requests_by_key[(i, c.name)])
                    for c in self.corners}
            self.record(point, kind, note, keys, round(before + per_point * (i + 1)))
        return out

    def record(self, point: PointResult, kind: str, note: str, keys: dict[str, str],
               ac_analyses: int) -> HistoryEntry:
        """Add ``point`` to the history (and its loop gains to :attr:`loop_gains`).

        Parameters
        ----------
        point
            The simulated point.
        kind, note
            See :class:`HistoryEntry`.
        keys
            Corner name -> journal key of its analysis.
        ac_analyses
            AC analyses (run and reused) so far, this point included.
        """
        entry = HistoryEntry(step=len(self.history) + 1, kind=kind, values=point.values,
                             worst=point.worst, ac_analyses=ac_analyses, note=note,
                             analyses=keys)
        self.history.append(entry)
        for c in point.corners:
            if c.loop_gain is not None:
                self.loop_gains[(entry.step, c.corner.name)] = c.loop_gain
        if self.progress is not None:
            self.progress(entry)
        return entry

    def device_quantities(self, quantities: dict[str, str], values: dict[str, float]
                          ) -> dict[str, dict[str, float]]:
        """Operating-point quantities per corner, e.g. ``{"gm1": "@m.x1.m1[gm]"}``.

        Runs an ``op`` (no AC) per corner; raises SimulatorError naming the corner when a
        quantity cannot be read.

        Parameters
        ----------
        quantities
            Name -> ngspice's expression of the quantity.
        values
            Compensation values by role, SI; roles left out keep the netlist's value.

        Returns
        -------
        dict
            Corner name -> name -> value (SI).
        """
        values = self.full_values(values)
        names = list(quantities)
        steps = [Step("op")]
        for name in names:
            steps.append(Step(f"let amploop_{name} = {quantities[name]}", (f"amploop_{name}",)))
        benches = {}
        for corner in self.corners:
            bench = build_testbench(self.amplifier, corner, values, label=f"{corner.name} (op)")
            deck_only = bench.request(self.time_limit_s)
            benches[corner.name] = type(deck_only)(label=deck_only.label, deck=deck_only.deck,
                                                   steps=tuple(steps),
                                                   time_limit_s=self.time_limit_s)
        found: dict[str, dict[str, float]] = {}
        for name, output, _ in self.runner.run(list(benches.items())):
            if isinstance(output, SimulatorError):
                raise SimulatorError(output.problem, place=name, kind=output.kind)
            assert isinstance(output, AnalysisOutput)
            found[name] = {q: float(output.reads[1 + k][f"amploop_{q}"].real[0])
                           for k, q in enumerate(names)}
        return found
