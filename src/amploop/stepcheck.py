"""The closed-loop step check at the final values: one small-step transient per corner.

Runs through the runner (journalled, so ``amploop report`` can redraw it without
simulating) after the loop-gain analyses; its figures go into the corner table.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .amplifier import Amplifier
from .errors import SimulatorError
from .job import Corner
from .runner import Runner
from .testbench import build_step_testbench
from .timedomain import StepMetrics, step_metrics, suggested_stop_s

__all__ = ["StepCheck", "run_step_checks", "step_stop_s", "with_step"]


@dataclass(frozen=True)
class StepCheck:
    """One corner's step response: figures, or the reason there are none."""

    corner: str
    key: str
    step_v: float
    step_at_s: float
    stop_s: float
    metrics: StepMetrics | None
    error: str | None = None
    time_s: np.ndarray | None = None
    output_v: np.ndarray | None = None

    def as_json(self) -> dict:
        m = self.metrics
        return {
            "analysis": self.key,
            "step_v": self.step_v,
            "step_at_s": self.step_at_s,
            "stop_s": self.stop_s,
            "band": None if m is None else m.band,
            "overshoot_pct": None if m is None else m.overshoot_pct,
            "settling_time_s": None if m is None else m.settling_s,
            "error": self.error,
        }


def step_stop_s(amplifier: Amplifier, unity_gain_hz: list[float | None]) -> float:
    """The transient's length: the job's, or long enough for the slowest corner to settle."""
    if amplifier.job.transient.stop_s is not None:
        return amplifier.job.transient.stop_s
    known = [f for f in unity_gain_hz if f]
    return suggested_stop_s(min(known)) if known else 1e-6


def run_step_checks(amplifier: Amplifier, corners: tuple[Corner, ...], values: dict[str, float],
                    runner: Runner, stop_s: float, time_limit_s: float) -> dict[str, StepCheck]:
    """Simulate the step response of every corner at ``values``; figures per corner."""
    spec = amplifier.job.transient
    benches = {c.name: build_step_testbench(amplifier, c, values, step_v=spec.step_v,
                                            stop_s=stop_s) for c in corners}
    requests = [(name, bench.request(time_limit_s)) for name, bench in benches.items()]
    keys = {name: runner.key_of(request) for name, request in requests}
    checks = {}
    for name, output, _ in runner.run(requests):
        bench = benches[name]
        if isinstance(output, SimulatorError):
            checks[name] = StepCheck(name, keys[name], bench.step_v, bench.step_at_s,
                                     bench.stop_s, None, output.problem)
            continue
        checks[name] = check_from_output(name, keys[name], bench.step_v, bench.step_at_s,
                                         bench.stop_s, output.reads, spec.band)
    return checks


def check_from_output(name: str, key: str, step_v: float, step_at_s: float, stop_s: float,
                      reads, band: float) -> StepCheck:
    """Figures of a finished step analysis (also used when redrawing from the journal)."""
    time_s = np.real(reads[0]["time"])
    output_v = np.real(reads[0]["v(tb_out)"])
    metrics = step_metrics(time_s, output_v, step_at_s, band)
    return StepCheck(name, key, step_v, step_at_s, stop_s, metrics, None, time_s, output_v)


def with_step(corner: dict, check: StepCheck | None) -> dict:
    """A corner's JSON with its step-response figures added (null when not run)."""
    corner = dict(corner)
    corner["overshoot_pct"] = None if check is None or check.metrics is None else check.metrics.overshoot_pct
    corner["settling_time_s"] = None if check is None or check.metrics is None else check.metrics.settling_s
    corner["step"] = None if check is None else check.as_json()
    return corner
