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
from pathlib import Path

from amploop.analysis.loopgain import FrequencyResponse
from amploop.bench.amplifier import Amplifier
from amploop.bench.deck import closed_loop_deck
from amploop.bench.loops import LoopReadout, loop_readout
from amploop.bench.oppoint import KEEP_OP_LINE, OperatingPoint, OperatingPointProbe
from amploop.bench.probe import Probe
from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.spec.model import Corner

__all__ = ["Testbench", "build_testbench", "save_line"]


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


def save_line(steps: tuple[Step, ...]) -> str:
    """The ``.save`` line of the node voltages and branch currents ``steps`` read (device
    quantities such as ``@m.x1.m1[vds]`` are read from the operating point's plot either
    way and are left out: a model without one would fail the analysis)."""
    names = dict.fromkeys(name for step in steps for name in step.read
                          if name.lower().startswith(("v(", "i(")))
    return ".save " + " ".join(names)


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
    op_probe = OperatingPointProbe.for_amplifier(amplifier)
    steps = loops.steps(ac_command) + (op_probe.step(),)
    # the AC analysis keeps its operating point as a plot, read after the AC runs; only
    # the vectors read are saved (an extracted netlist's tens of thousands of nodes
    # otherwise cost a third of each AC run, and 16 bytes per node and frequency)
    loop = [*loops.elements(), KEEP_OP_LINE, save_line(steps)]
    deck, notes = closed_loop_deck(amplifier, corner, full_values, loop_elements=loop,
                                   title=f"amploop loop gain: job {job.name}, corner {corner.name}")
    return Testbench(corner=corner, values=full_values, deck=deck, steps=steps, loops=loops,
                     files=amplifier.files, notes=tuple(notes), label=label or corner.name,
                     op_probe=op_probe)
