"""The closed-loop step check at the final values: one small-step transient per corner.

Runs through the runner (journalled, so ``amploop report`` can redraw it without
simulating) after the loop-gain analyses; its figures go into the corner table.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.timedomain import StepMetrics, step_metrics, suggested_stop_s
from amploop.bench.amplifier import Amplifier
from amploop.bench.nodes import NODE_AMP, NODE_AMP_N
from amploop.bench.stepbench import STEP_AT_FRACTION, build_step_testbench
from amploop.errors import SimulatorError
from amploop.sim.runner import Runner
from amploop.spec.model import Corner
from amploop.spice.labels import JOURNAL_KEY

__all__ = ["StepCheck", "run_step_checks", "step_stop_s", "step_window_s", "with_step"]


@dataclass(frozen=True)
class StepCheck:
    """One corner's step response: figures, or the reason there are none.

    Attributes
    ----------
    corner
        The corner's name.
    key
        The journal key of its transient analysis.
    step_v, step_at_s, stop_s
        The input step (volts), when it starts and the transient's length (seconds), as
        simulated (:class:`~amploop.bench.testbench.StepBench`).
    metrics
        Overshoot and settling; None when the analysis failed.
    error
        Why the analysis failed; None when it did not.
    time_s, output_v
        The transient: time, seconds, and the amplifier's output, volts; None when the
        analysis failed.
    resistance_share
        With a MOSFET for Rc: the largest relative change of its channel resistance
        during the step; None otherwise.
    warning
        Set when that change exceeds ``[transient].resistance_share``; None otherwise.
    """

    corner: str
    key: str
    step_v: float
    step_at_s: float
    stop_s: float
    metrics: StepMetrics | None
    error: str | None = None
    time_s: np.ndarray | None = None
    output_v: np.ndarray | None = None
    resistance_share: float | None = None  # triode device: largest relative change
    warning: str | None = None

    def as_json(self) -> dict:
        """The corner's ``step`` entry in results.json (its overshoot and settling time are
        keys of the corner itself, :func:`with_step`)."""
        m = self.metrics
        return {
            JOURNAL_KEY: self.key,
            "step_v": self.step_v,
            "step_at_s": self.step_at_s,
            "stop_s": self.stop_s,
            "band": None if m is None else m.band,
            "error": self.error,
            "device_resistance_share": self.resistance_share,
        }


def step_stop_s(amplifier: Amplifier, unity_gain_hz: list[float | None]) -> float:
    """The transient's length: the job's, or long enough for the slowest corner to settle.

    Parameters
    ----------
    amplifier
        The prepared amplifier; its job's ``[transient].stop``, seconds, wins when given.
    unity_gain_hz
        Each corner's unity-gain frequency, Hz (None where not measured); the lowest
        decides (:func:`~amploop.analysis.timedomain.suggested_stop_s`), and 1 µs is used when none
        is known.

    Returns
    -------
    float
        Seconds.
    """
    if amplifier.job.transient.stop_s is not None:
        return amplifier.job.transient.stop_s
    known = [f for f in unity_gain_hz if f]
    return suggested_stop_s(min(known)) if known else 1e-6


def step_window_s(stop_s: float) -> float:
    """The time a step run of ``stop_s`` seconds follows the output after its step, seconds
    (the ``window_s`` of :func:`~amploop.analysis.settling.settling_time` that predicts it)."""
    return (1.0 - STEP_AT_FRACTION) * stop_s


def run_step_checks(amplifier: Amplifier, corners: tuple[Corner, ...], values: dict[str, float],
                    runner: Runner, stop_s: float, time_limit_s: float,
                    device_vt: dict[str, float] | None = None) -> dict[str, StepCheck]:
    """Simulate the step response of every corner at ``values``; figures per corner.

    With a MOSFET standing in for Rc and its threshold per corner in ``device_vt``, the
    change of its channel resistance during the step is computed (square law) and a
    warning set when it exceeds ``[transient].resistance_share``.

    Parameters
    ----------
    amplifier
        The prepared amplifier; its job's ``[transient]`` gives the step and the band.
    corners
        The corners to simulate.
    values
        Compensation values by role, SI (farads, ohms, or the device size).
    runner
        Runs the transients through the journal.
    stop_s
        Length of each transient, seconds (:func:`step_stop_s`).
    time_limit_s
        Seconds one transient may take before it counts as hung.
    device_vt
        Corner name -> the device's threshold voltage VT, volts; None for no linearity
        check.

    Returns
    -------
    dict
        Corner name -> :class:`StepCheck`, failed analyses included; empty with the user's
        own ``[testbench]`` (amploop does not know where its input is).
    """
    if amplifier.user_deck is not None:
        return {}
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
        check = check_from_output(name, keys[name], bench.step_v, bench.step_at_s,
                                  bench.stop_s, output.reads, spec.band)
        if amplifier.device is not None and device_vt and name in device_vt:
            check = _with_linearity(amplifier, check, output.reads[0], device_vt[name],
                                    spec.resistance_share)
        checks[name] = check
    return checks


def _with_linearity(amplifier: Amplifier, check: StepCheck, reads: dict, vt: float,
                    limit: float) -> StepCheck:
    from dataclasses import replace

    from amploop.analysis.triode import resistance_share_during

    device = amplifier.device

    def node(name: str) -> np.ndarray:
        vector = amplifier.node_vector(name)
        return np.zeros_like(check.time_s) if vector == "0" else np.real(reads[vector])

    vg, vd, vs = node(device.gate), node(device.drain), node(device.source)
    share = resistance_share_during(vg - vs, vd - vs, vt)
    warning = None
    if share > limit:
        warning = (f"corner {check.corner}: {device.name}'s channel resistance moves by "
                   f"{share:.0%} during the step (VGS {np.ptp(vg - vs) * 1e3:.1f} mV and VDS "
                   f"{np.ptp(vd - vs) * 1e3:.1f} mV of excursion); more than "
                   f"[transient].resistance_share = {limit:g}")
    return replace(check, resistance_share=share, warning=warning)


def check_from_output(name: str, key: str, step_v: float, step_at_s: float, stop_s: float,
                      reads, band: float) -> StepCheck:
    """Figures of a finished step analysis (also used when redrawing from the journal); a
    fully-differential amplifier's output is the difference of its two outputs."""
    time_s = np.real(reads[0]["time"])
    output_v = np.real(reads[0][f"v({NODE_AMP})"])
    if f"v({NODE_AMP_N})" in reads[0]:
        output_v = output_v - np.real(reads[0][f"v({NODE_AMP_N})"])
    metrics = step_metrics(time_s, output_v, step_at_s, band)
    return StepCheck(name, key, step_v, step_at_s, stop_s, metrics, None, time_s, output_v)


def with_step(corner: dict, check: StepCheck | None) -> dict:
    """``corner``, a corner's JSON, with the step-response figures of ``check`` added (null
    when not run)."""
    corner = dict(corner)
    corner["overshoot_pct"] = None if check is None or check.metrics is None else check.metrics.overshoot_pct
    corner["settling_time_s"] = None if check is None or check.metrics is None else check.metrics.settling_s
    corner["step"] = None if check is None else check.as_json()
    return corner
