"""Which loops a testbench measures, with which probes, and which of its runs hold which.

A single-ended amplifier has one loop, broken at its output. A fully-differential one has
the differential loop, broken at both outputs by :class:`~amploop.bench.probe.DifferentialInjection`,
and, when the job names the common-mode break, the common-mode feedback loop, broken there
by a second double injection that runs after the differential one in the same ngspice
session (the differential loop stays closed meanwhile: its sources are back at AC 0).

Optionally one more AC run follows the probes' runs: the closed-loop response from the
signal source to the output. Every injection is switched off (a series source at AC 0 is
a short, a shunt source at AC 0 an open, so the loop is closed as in the amplifier's
application) and the signal source ``Vsig`` gets AC 1; the run reads v(tb_out). A
fully-differential amplifier's two signal sources get ½ and ½ at 180°, as the step deck
drives them ±½, and the response is v(tb_out) − v(tb_outn).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse
from amploop.bench.nodes import (
    NODE_AMP,
    NODE_AMP_N,
    NODE_CM_DRIVE,
    NODE_CM_DRIVEN,
    NODE_FEEDBACK,
    NODE_FEEDBACK_N,
)
from amploop.bench.probe import (
    RERUN_VECTOR,
    DifferentialInjection,
    DoubleInjection,
    Probe,
    make_probe,
)
from amploop.bench.requests import Step
from amploop.spec.model import Job

__all__ = ["COMMON_MODE_VECTOR", "LoopReadout", "loop_readout", "readout_for"]

#: The signal sources of the deck (:func:`~amploop.bench.testbench.closed_loop_deck`), as
#: ngspice names them: the single output's (or the first output's), and the second output's.
SIGNAL_SOURCE, SIGNAL_SOURCE_N = "vsig", "vsign"

#: The vector a hand-runnable deck sets to the common-mode loop gain.
COMMON_MODE_VECTOR = "cm_loop_gain"

#: The common-mode loop's probe: it starts off and runs third and fourth (plots ac3, ac4).
COMMON_MODE_PROBE = DoubleInjection(series_source="Vtb_cm_series", shunt_source="Itb_cm_shunt",
                                    starts_on=False, first_plot=3)


@dataclass(frozen=True)
class LoopReadout:
    """The probes of a loop-gain deck and how its runs are read.

    Attributes
    ----------
    probe
        The main loop's probe (the differential loop's for a fully-differential amplifier),
        between ``tb_out`` and ``tb_fb``.
    common_mode
        The common-mode loop's probe, between ``tb_cma`` and ``tb_cmb``; None when that loop
        is not measured.
    closed_loop
        Whether the closed-loop response run follows the probes' runs (off: the steps are
        exactly those of the probes).
    """

    probe: Probe
    common_mode: DoubleInjection | None = None
    closed_loop: bool = False

    def elements(self) -> list[str]:
        """Every probe element line of the deck."""
        lines = self.probe.elements(NODE_AMP, NODE_FEEDBACK)
        if self.common_mode is not None:
            lines += self.common_mode.elements(NODE_CM_DRIVE, NODE_CM_DRIVEN)
        return lines

    def steps(self, ac_command: str) -> tuple[Step, ...]:
        """The commands of both loops' runs with the sweep ``ac_command``, main loop first."""
        steps = self.probe.steps(ac_command, NODE_AMP, NODE_FEEDBACK)
        if self.common_mode is not None:
            steps += self.probe.off_steps()
            steps += self.common_mode.steps(ac_command, NODE_CM_DRIVE, NODE_CM_DRIVEN)
        if self.closed_loop:
            steps += self._closed_loop_steps(ac_command)
        return steps

    @property
    def _differential(self) -> bool:
        return isinstance(self.probe, DifferentialInjection)

    def _closed_loop_steps(self, ac_command: str) -> tuple[Step, ...]:
        """Injections off, the signal source(s) on, one run of ``ac_command`` reading the
        output(s)."""
        last = self.common_mode or self.probe
        if not hasattr(last, "off_steps"):
            raise ValueError(f"the {self.probe.name!r} probe cannot close the loop for a "
                             "closed-loop response")
        if self._differential:
            drive = (Step(f"alter {SIGNAL_SOURCE} acmag=0.5"),
                     Step(f"alter {SIGNAL_SOURCE_N} acmag=0.5"),
                     Step(f"alter {SIGNAL_SOURCE_N} acphase=180"))
            outputs = (f"v({NODE_AMP})", f"v({NODE_AMP_N})")
        else:
            drive = (Step(f"alter {SIGNAL_SOURCE} acmag=1"),)
            outputs = (f"v({NODE_AMP})",)
        return last.off_steps() + drive + (Step(ac_command, ("frequency", *outputs)),)

    def closed_loop_response(self, reads: tuple[dict[str, np.ndarray], ...]
                             ) -> FrequencyResponse:
        """The closed-loop response from the signal source to the output (V/V; the
        differential output per volt of differential input for a fully-differential
        amplifier).

        Parameters
        ----------
        reads
            The vectors read after each step, one dict per step.

        Raises
        ------
        ValueError
            When the readout was made without ``closed_loop``.
        """
        if not self.closed_loop:
            raise ValueError("this testbench does not run the closed-loop response")
        run = reads[len(self.steps("ac")) - 1]
        values = np.asarray(run[f"v({NODE_AMP})"], dtype=complex)
        if self._differential:
            values = values - np.asarray(run[f"v({NODE_AMP_N})"], dtype=complex)
        return FrequencyResponse(np.real(run["frequency"]), values)

    @property
    def _common_mode_offset(self) -> int:
        """The index of the common-mode loop's first step."""
        return len(self.probe.steps("ac", NODE_AMP, NODE_FEEDBACK)) + len(self.probe.off_steps())

    def loop_gain(self, reads: tuple[dict[str, np.ndarray], ...]) -> FrequencyResponse:
        """The main loop's gain from ``reads``, the vectors read after each step."""
        return self.probe.loop_gain(reads, NODE_AMP, NODE_FEEDBACK)

    def common_mode_loop_gain(self, reads: tuple[dict[str, np.ndarray], ...]
                              ) -> FrequencyResponse | None:
        """The common-mode loop's gain from ``reads``; None when it is not measured."""
        if self.common_mode is None:
            return None
        return self.common_mode.loop_gain(reads[self._common_mode_offset:], NODE_CM_DRIVE,
                                          NODE_CM_DRIVEN)

    def rerun_formula(self) -> list[str]:
        """The ``.control`` lines that set :data:`~amploop.bench.probe.RERUN_VECTOR` (and
        :data:`COMMON_MODE_VECTOR`) after the runs."""
        lines = self.probe.rerun_formula(NODE_AMP, NODE_FEEDBACK)
        if self.common_mode is not None:
            lines += self.common_mode.rerun_formula(NODE_CM_DRIVE, NODE_CM_DRIVEN,
                                                    COMMON_MODE_VECTOR)
        return lines

    @property
    def vectors(self) -> tuple[str, ...]:
        """The vectors :meth:`rerun_formula` sets, main loop first."""
        return (RERUN_VECTOR,) + ((COMMON_MODE_VECTOR,) if self.common_mode else ())


def loop_readout(job: Job, probe: Probe | None = None, closed_loop: bool = False
                 ) -> LoopReadout:
    """The loops ``job`` measures: its ``[analysis].probe`` (or ``probe``) on the single
    output, or the differential injection and the common-mode probe of a fully-differential
    amplifier; with ``closed_loop``, followed by the closed-loop response run."""
    if not job.amplifier.fully_differential:
        readout = LoopReadout(probe or make_probe(job.analysis.probe))
    else:
        readout = readout_for(job.analysis.probe, ["differential"] + (
            ["common_mode"] if job.amplifier.common_mode_break else []))
    return replace(readout, closed_loop=True) if closed_loop else readout


def readout_for(probe_name: str, loops: list[str] | None = None) -> LoopReadout:
    """The readout of a run from what its results.json says: ``probe_name`` (its
    ``probe``) on the single output when ``loops`` is None (a single-ended amplifier), else
    the differential injection, with the common-mode probe when ``"common_mode"`` is in
    ``loops``; the same readout :func:`loop_readout` gave the run."""
    if loops is None:
        return LoopReadout(make_probe(probe_name))
    common_mode = COMMON_MODE_PROBE if "common_mode" in loops else None
    return LoopReadout(DifferentialInjection(a_n=NODE_AMP_N, b_n=NODE_FEEDBACK_N), common_mode)
