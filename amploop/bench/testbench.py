"""The closed-loop testbench around the user's amplifier: text in, text out.

For one corner and one set of compensation values this writes a complete ngspice deck:
the corner's parameters, temperature and model section, the user's netlist (with the
compensation values set where the netlist keeps them), the subckt instance with its
bias sources, the input common mode, the feedback network, the load, and the loop-gain
probe between the amplifier output and the feedback network::

    tb_sig --Z1-- tb_inn --Z2-- tb_fb ==probe== tb_out (subckt out, load CL)
                    |                              |
                  (in_n)     X1 two-stage amp    (out)
    tb_inp (Vcm) -- (in_p)

The signal source ``tb_sig`` sits at the common-mode voltage and is AC ground during the
loop-gain runs, so the DC output settles at the common mode for either feedback kind.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from pathlib import Path

from amploop.analysis.loopgain import FrequencyResponse
from amploop.bench.amplifier import Amplifier
from amploop.bench.loops import LoopReadout, loop_readout
from amploop.bench.nodes import NODE_AMP, NODE_AMP_N, NODE_FEEDBACK, NODE_FEEDBACK_N, port_node
from amploop.bench.oppoint import KEEP_OP_LINE, OperatingPoint, OperatingPointProbe
from amploop.bench.probe import DoubleInjection, Probe
from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.spec.model import Corner
from amploop.spice.ngread import deck_text
from amploop.spice.units import parse_value, spice_number

__all__ = ["StepBench", "Testbench", "build_step_testbench", "build_testbench"]


@dataclass(frozen=True)
class Testbench:
    """A generated deck for one corner and one set of compensation values.

    Attributes
    ----------
    corner
        The corner it simulates.
    values
        Compensation values by role, SI (farads, ohms, or the device size).
    deck
        ngspice netlist text, title line first and ``.end`` last, no ``.control`` block.
    steps
        Simulator commands to run after loading the deck.
    loops
        The loop-gain probes in it, and which runs hold which loop.
    files
        Files the deck reads (absolute paths).
    notes
        Lines of the user's netlist left out of the testbench, and similar remarks.
    label
        Names the analysis in messages and in the journal (empty: the corner's name).
    op_probe
        What the deck reads of its operating point after the AC runs (the last step);
        None when it reads none.
    """

    corner: Corner
    values: dict[str, float]
    deck: str
    steps: tuple[Step, ...]
    loops: LoopReadout
    files: tuple[Path, ...]
    notes: tuple[str, ...] = ()
    label: str = ""
    op_probe: OperatingPointProbe | None = None

    def request(self, time_limit_s: float, after=None) -> AnalysisRequest:
        """The analysis request for a worker, hung after ``time_limit_s`` seconds (``after``:
        see :class:`AnalysisRequest`)."""
        return AnalysisRequest(label=self.label or self.corner.name, deck=self.deck,
                               steps=self.steps, time_limit_s=time_limit_s, after=after)

    def loop_gain(self, output: AnalysisOutput) -> FrequencyResponse:
        """The loop gain from ``output``, a finished analysis of this testbench (the
        differential loop's for a fully-differential amplifier)."""
        return self.loops.loop_gain(output.reads)

    def closed_loop_response(self, output: AnalysisOutput) -> FrequencyResponse:
        """The signal source to output response in ``output`` (ValueError without ``closed_loop``)."""
        return self.loops.closed_loop_response(output.reads)

    def common_mode_loop_gain(self, output: AnalysisOutput) -> FrequencyResponse | None:
        """The common-mode loop's gain from ``output``; None when it is not measured."""
        return self.loops.common_mode_loop_gain(output.reads)

    def operating_point(self, output: AnalysisOutput) -> OperatingPoint | None:
        """The DC operating point read in ``output`` (None when the deck reads none or
        ngspice gave none)."""
        if self.op_probe is None or len(output.reads) < len(self.steps):
            return None
        return self.op_probe.read(output.reads[-1])

    def hand_deck(self, data_file: str = "loop_gain.txt") -> str:
        """The deck with a ``.control`` block, to rerun by hand: ``ngspice -b FILE``.

        It runs the same commands and writes the loop gain (frequency, real, imaginary)
        to ``data_file`` with ngspice's ``wrdata``; the common-mode loop's, when measured,
        goes to the same name with ``-cm`` before its suffix.

        Parameters
        ----------
        data_file
            The file the deck writes, relative to where ngspice runs.
        """
        steps = self.steps[:-1] if self.op_probe is not None else self.steps
        lines = [
            ".control",
            "set num_threads=1",
            *[step.command for step in steps],
        ]
        lines += self.loops.rerun_formula()
        stem, dot, suffix = data_file.rpartition(".")
        files = [data_file, f"{stem}-cm{dot}{suffix}" if dot else f"{data_file}-cm"]
        lines += [f"wrdata {file} {vector}" for file, vector in zip(files, self.loops.vectors)]
        if self.op_probe is not None:  # the operating point, printed
            op = self.steps[-1]
            lines += [op.command, "print " + " ".join(op.read)]
        lines += [
            "quit",
            ".endc",
        ]
        body = self.deck.rstrip()
        assert body.lower().endswith(".end")
        return body[: -len(".end")] + "\n".join(lines) + "\n.end\n"


def _job_text(job, value: str, place: str) -> str:
    """``value``, a string from the job file, checked to stay on its deck line: a line break
    of any kind, or a control character, is a JobError naming ``place``."""
    return deck_text(str(value), what="the value", file=job.path, place=place)


def _quote(value: str) -> str:
    """A job-file value as a SPICE value: numbers stay, expressions get braces if needed."""
    text = value.strip()
    if text.startswith(("{", "'")):
        return text
    try:
        parse_value(text)
    except ValueError:
        return "{" + text + "}"
    return text  # a SPICE number as the user wrote it; ngspice reads it the same way


def build_testbench(
    amplifier: Amplifier,
    corner: Corner,
    values: dict[str, float],
    *,
    probe: Probe | None = None,
    ac_command: str | None = None,
    label: str | None = None,
    closed_loop: bool = False,
) -> Testbench:
    """Write the closed-loop loop-gain testbench for one corner.

    Parameters
    ----------
    amplifier
        The prepared amplifier (job + netlist).
    corner
        Model section, temperature (°C) and parameter values (SI).
    values
        Compensation values by role (``cc`` in farads, ``rc`` in ohms or a device size);
        roles left out keep the netlist's value.
    probe
        Defaults to the job's ``[analysis].probe`` (a fully-differential amplifier has
        its own probes).
    ac_command
        Defaults to the job's sweep.
    label
        Names the analysis in messages and in the journal (default: the corner's name).
    closed_loop
        Also run the closed-loop response after the probes' runs
        (:meth:`Testbench.closed_loop_response`); off, the steps are exactly the probes'.

    Returns
    -------
    Testbench
    """
    job = amplifier.job
    loops = loop_readout(job, probe, closed_loop)
    ac_command = ac_command or job.analysis.ac_command()
    full_values = amplifier.values_in_effect(values)
    # the AC analysis keeps its operating point as a plot, read after the AC runs
    loop = [*loops.elements(), KEEP_OP_LINE]
    deck, notes = closed_loop_deck(amplifier, corner, full_values, loop_elements=loop,
                                   title=f"amploop loop gain: job {job.name}, corner {corner.name}")
    op_probe = OperatingPointProbe.for_amplifier(amplifier)
    steps = loops.steps(ac_command) + (op_probe.step(),)
    return Testbench(corner=corner, values=full_values, deck=deck, steps=steps, loops=loops,
                     files=amplifier.files, notes=tuple(notes), label=label or corner.name,
                     op_probe=op_probe)


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
    _job_text(job, job.bias.common_mode, "[bias].common_mode")
    step_at = 0.02 * stop_s
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
        low, high = _quote(job.bias.common_mode), "{" + f"{job.bias.common_mode}+{step_v!r}" + "}"
    return (f"pulse({low} {high} {spice_number(step_at_s)} {spice_number(rise_s)} "
            f"{spice_number(rise_s)} {spice_number(10 * stop_s)} {spice_number(20 * stop_s)})")


def closed_loop_deck(
    amplifier: Amplifier,
    corner: Corner,
    values: dict[str, float],
    *,
    loop_elements: list[str],
    title: str,
    signal: str = "ac 0",
    signal_n: str = "ac 0",
) -> tuple[str, list[str]]:
    """The deck text of the amplifier in its feedback loop.

    ``loop_elements`` connect ``tb_out`` (amplifier side) to ``tb_fb`` (feedback side),
    and for a fully-differential amplifier ``tb_outn`` to ``tb_fbn`` and the common-mode
    break's two sides: probes, or plain shorts for time-domain runs. ``signal`` is appended
    to the signal source (``ac 0`` for loop-gain runs, a ``pulse(...)`` for a step), and
    ``signal_n`` to the second output's signal source.
    """
    job = amplifier.job
    text = partial(_job_text, job)  # every job string written below passes through it
    netlist_text, instance_params, notes = amplifier.render(values, corner.params)
    defined = set(amplifier.netlist.global_params)
    top_params = {text(k, f"corner {corner.name!r} params"): v for k, v in corner.params.items()
                  if k.lower() not in defined}
    text(job.name, "name")
    text(corner.name, f"corner {corner.name!r}")

    lines = [f"* {title}", "* generated by amploop; rerun by hand with: ngspice -b <this file>"]
    lines.append("* results are only as good as the device models; sign-off stays with your own flow")
    if top_params:
        lines.append(".param " + " ".join(f"{k}={spice_number(v)}" for k, v in top_params.items()))
    lines.append(f".temp {spice_number(corner.temp)}")
    models = job.amplifier.models
    if models is not None:
        path = text(str(models), "[amplifier].models")
        if corner.lib is not None:
            lines.append(f'.lib "{path}" {text(corner.lib, f"corner {corner.name!r} lib")}')
        else:
            lines.append(f'.include "{path}"')
    for i, include in enumerate(job.amplifier.includes):
        lines.append(f'.include "{text(str(include), f"[amplifier].includes[{i}]")}"')
    root = text(str(amplifier.netlist.root), "[amplifier].netlist")
    lines.append(f"* ---- user netlist {root} (compensation values set by amploop)")
    lines.append(netlist_text)
    lines.append("* ---- end of user netlist")

    lines.append("* ---- testbench")
    subckt = amplifier.subckt
    nodes = {
        job.amplifier.in_p.lower(): "tb_inp",
        job.amplifier.in_n.lower(): "tb_inn",
        job.amplifier.out.lower(): NODE_AMP,
    }
    for number, source in enumerate(job.bias.sources, start=1):
        node = port_node(source.port)
        nodes[source.port.lower()] = node
        place = f"[bias].{source.port}"
        value = _quote(text(source.value, place))
        port = text(source.port, place)
        if source.kind == "volts":
            lines.append(f"Vbias{number} {node} 0 dc {value}  ; port {port}")
        else:
            lines.append(f"Ibias{number} {node} 0 dc {value}  ; port {port}")
    if job.amplifier.out_n is not None:
        nodes[job.amplifier.out_n.lower()] = NODE_AMP_N
    instance = ["X1", *[nodes[p.lower()] for p in subckt.ports], *amplifier.extra_ports,
                subckt.name]
    instance += [f"{text(k, '[compensation]')}={v}" for k, v in instance_params.items()]
    lines.append(" ".join(instance))
    common_mode = _quote(text(job.bias.common_mode, "[bias].common_mode"))
    sides = [("", "tb_sig", "tb_inn", NODE_FEEDBACK, NODE_AMP, signal)]
    if job.amplifier.out_n is None:
        lines.append(f"Vcm tb_inp 0 dc {common_mode}")
    else:  # the same network on the second side, from tb_outn back to the other input
        sides.append(("n", "tb_sign", "tb_inp", NODE_FEEDBACK_N, NODE_AMP_N, signal_n))
    for suffix, sig, inverting, fb_node, out_node, waveform in sides:
        lines.append(f"Vsig{suffix} {sig} 0 dc {common_mode} {waveform}")
        lines.extend(_feedback_lines(job, text, suffix, sig, inverting, fb_node, out_node))
    lines.extend(loop_elements)
    lines.append(".end")
    return "\n".join(lines) + "\n", notes


def _feedback_lines(job, text, suffix: str, sig: str, inverting: str, fb_node: str,
                    out_node: str) -> list[str]:
    """The feedback network of one side: Z1 from ``sig`` to ``inverting``, Z2 from
    ``fb_node`` to ``inverting`` (with the DC path across a capacitor), the load at
    ``out_node``; element names end in ``suffix``."""
    fb = job.feedback

    def value(key: str) -> str:
        return _quote(text(getattr(fb, key), f"[feedback].{key}"))

    if fb.kind == "resistive":
        lines = [f"Rin{suffix} {sig} {inverting} {value('input')}",
                 f"Rfb{suffix} {fb_node} {inverting} {value('feedback')}"]
    else:
        lines = [f"Cin{suffix} {sig} {inverting} {value('input')}",
                 f"Cfb{suffix} {fb_node} {inverting} {value('feedback')}",
                 f"Rdc{suffix} {fb_node} {inverting} {value('dc_path')}"]
    return lines + [f"Cload{suffix} {out_node} 0 {value('load')}"]
