"""The closed-loop small-step transient of one corner: the loop-gain testbench with its
probe replaced by shorts and a step at the signal source(s)."""

from __future__ import annotations

from dataclasses import dataclass

from amploop.bench.amplifier import Amplifier
from amploop.bench.deck import closed_loop_deck, job_text, quote
from amploop.bench.nodes import NODE_AMP, NODE_AMP_N, NODE_FEEDBACK, NODE_FEEDBACK_N
from amploop.bench.probe import DoubleInjection
from amploop.bench.requests import AnalysisRequest, Step
from amploop.spec.model import Corner
from amploop.spice.units import spice_number

__all__ = ["STEP_AT_FRACTION", "StepBench", "build_step_testbench"]

#: The step comes at this share of the run's length (the settling is read over the rest).
STEP_AT_FRACTION = 0.02


@dataclass(frozen=True)
class StepBench:
    """A closed-loop small-step transient for one corner (probe replaced by a short).

    The signal source steps by ``step_v`` at ``step_at_s``; the output moves by the
    closed-loop gain times that (−Z2/Z1 for the inverting configuration).

    Attributes
    ----------
    corner, values, deck, label
        As for :class:`Testbench`.
    steps
        The one ``tran`` step, reading time, the output and (with a device for Rc) the
        device's terminals.
    step_v
        Size of the input step, volts.
    step_at_s
        When the step starts, seconds.
    stop_s
        Length of the transient, seconds.
    """

    corner: Corner
    values: dict[str, float]
    deck: str
    steps: tuple[Step, ...]
    step_v: float
    step_at_s: float
    stop_s: float
    label: str = ""

    def request(self, time_limit_s: float) -> AnalysisRequest:
        """The analysis request for a worker, hung after ``time_limit_s`` seconds."""
        return AnalysisRequest(label=self.label or self.corner.name, deck=self.deck,
                               steps=self.steps, time_limit_s=time_limit_s)


def build_step_testbench(
    amplifier: Amplifier,
    corner: Corner,
    values: dict[str, float],
    *,
    step_v: float,
    stop_s: float,
    label: str | None = None,
) -> StepBench:
    """Write the closed-loop step-response deck for one corner.

    The deck tightens ngspice's tolerances (reltol 1e-6, vntol 1 nV) so that a 0.1 %
    settling band of a few-millivolt step is resolved; the loop-gain decks are left alone.

    Parameters
    ----------
    amplifier, corner, values
        As for :func:`build_testbench`.
    step_v
        Size of the input step at the signal source, volts (small: the loop stays linear).
    stop_s
        Length of the transient, seconds; the step comes at 2 % of it.
    label
        Names the analysis in messages and in the journal (default: the corner's name
        followed by ``(step)``).

    Returns
    -------
    StepBench
    """
    job = amplifier.job
    full_values = amplifier.values_in_effect(values)
    job_text(job, job.bias.common_mode, "[bias].common_mode")
    step_at = STEP_AT_FRACTION * stop_s
    rise = 1e-4 * stop_s
    # a fully-differential amplifier gets the step in anti-phase, half on each input
    halves = (step_v / 2, -step_v / 2) if amplifier.fully_differential else (step_v,)
    signals = [_pulse(job, corner, half, step_at, rise, stop_s) for half in halves]
    shorts = [f"{DoubleInjection.series_source} {NODE_FEEDBACK} {NODE_AMP} dc 0"]
    if amplifier.fully_differential:
        shorts.append(f"Vtb_series_n {NODE_AMP_N} {NODE_FEEDBACK_N} dc 0")
    if amplifier.common_mode_break is not None:
        shorts.append("Vtb_cm_series tb_cmb tb_cma dc 0")
    deck, _ = closed_loop_deck(
        amplifier, corner, full_values,
        loop_elements=[*shorts, ".options reltol=1e-6 vntol=1e-9 abstol=1e-15"],
        title=f"amploop step response: job {job.name}, corner {corner.name}",
        signal=signals[0], signal_n=signals[-1],
    )
    tmax = stop_s / 4000
    command = f"tran {spice_number(tmax)} {spice_number(stop_s)} 0 {spice_number(tmax)}"
    reads = ["time", f"v({NODE_AMP})"] + ([f"v({NODE_AMP_N})"] if amplifier.fully_differential
                                          else [])
    device = amplifier.device
    if device is not None:  # the triode device's terminals, for the linearity check
        reads += [v for v in dict.fromkeys(amplifier.node_vector(n) for n in
                                           (device.drain, device.gate, device.source))
                  if v != "0" and v not in reads]
    return StepBench(corner=corner, values=full_values, deck=deck,
                     steps=(Step(command, tuple(reads)),), step_v=step_v,
                     step_at_s=step_at, stop_s=stop_s, label=label or f"{corner.name} (step)")


def _pulse(job, corner: Corner, step_v: float, step_at_s: float, rise_s: float,
           stop_s: float) -> str:
    """The signal source's waveform: from the common mode up by ``step_v`` (volts) at
    ``step_at_s``, rising in ``rise_s``, for a run of ``stop_s`` (seconds)."""
    from amploop.spice.expressions import evaluate

    try:
        start = evaluate(job.bias.common_mode, {k: repr(v) for k, v in corner.params.items()})
        low, high = spice_number(start), spice_number(start + step_v)
    except ValueError:
        low, high = quote(job.bias.common_mode), "{" + f"{job.bias.common_mode}+{step_v!r}" + "}"
    return (f"pulse({low} {high} {spice_number(step_at_s)} {spice_number(rise_s)} "
            f"{spice_number(rise_s)} {spice_number(10 * stop_s)} {spice_number(20 * stop_s)})")

