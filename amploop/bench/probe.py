"""Loop-gain probes: the elements that break the loop, the runs they need, and the formula.

A probe sits between the amplifier side of the output node (``a``: the subckt's output
with the load capacitor) and the feedback side (``b``: the feedback network). Both probes
leave the DC operating point alone.

``double-injection`` (default)
    A series voltage source and a shunt current source, one AC run each, combined into
    the true return ratio with the feedback network's loading in place (Middlebrook 1975;
    M. Tian et al., "Striving for small-signal stability", IEEE Circuits & Devices
    Magazine 17(1), 2001). Exact for any impedances either side of the break.
``lc``
    The naive break: a large inductor closes the loop at DC and opens it at AC, and a
    large capacitor drives side ``b`` from an AC source. The amplifier side then sees only
    the load, not the feedback network, so the result is wrong wherever the feedback
    network loads the output (a resistive divider of a few kΩ against an output resistance
    of tens of kΩ): DC loop gain too high and phase margin off by degrees. Kept to show the
    difference.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse, double_injection, voltage_break
from amploop.bench.requests import Step

__all__ = ["RERUN_VECTOR", "DoubleInjection", "LcBreak", "Probe", "make_probe"]

#: The vector a hand-runnable deck's formula (:meth:`Probe.rerun_formula`) defines.
RERUN_VECTOR = "loop_gain"


class Probe:
    """Interface of a loop-gain probe."""

    name: str = ""

    def elements(self, a: str, b: str) -> list[str]:
        """Netlist lines that break the loop between node ``a`` and node ``b``."""
        raise NotImplementedError

    def steps(self, ac_command: str, a: str, b: str) -> tuple[Step, ...]:
        """The simulator commands, and the vectors to read after each.

        Parameters
        ----------
        ac_command
            The ngspice ``ac`` command of the sweep.
        a, b
            The amplifier-side and the feedback-side node of the break.
        """
        raise NotImplementedError

    def loop_gain(self, reads: tuple[dict[str, np.ndarray], ...], a: str, b: str
                  ) -> FrequencyResponse:
        """Combine the vectors read after the steps into the loop gain.

        Parameters
        ----------
        reads
            The vectors read after each step, one dict per step
            (:attr:`~amploop.sim.ngspice.AnalysisOutput.reads`).
        a, b
            The amplifier-side and the feedback-side node of the break.
        """
        raise NotImplementedError

    def rerun_formula(self, a: str, b: str) -> list[str]:
        """The ``.control`` lines of a hand-runnable deck that set the vector
        :data:`RERUN_VECTOR` to the loop gain, after the commands of :meth:`steps` ran in a
        fresh ngspice session (its AC runs are then the plots ``ac1``, ``ac2``, …).

        Parameters
        ----------
        a, b
            The amplifier-side and the feedback-side node of the break.
        """
        raise NotImplementedError


@dataclass(frozen=True)
class DoubleInjection(Probe):
    """Series voltage plus shunt current injection, two AC runs in one simulator session.

    Attributes
    ----------
    name
        The probe's name, as ``[analysis].probe`` gives it.
    """

    name: str = "double-injection"
    #: The series voltage injection source, and the shunt current injection source.
    series_source = "Vtb_series"
    shunt_source = "Itb_shunt"

    @property
    def _series_current(self) -> str:
        """ngspice's vector of the series source's branch current."""
        return f"i({self.series_source.lower()})"

    def elements(self, a: str, b: str) -> list[str]:
        """The series source with its + terminal at ``b`` and its − at ``a`` (AC 1), and the
        shunt source from ground into ``a`` (AC 0 until the second run)."""
        return [
            f"{self.series_source} {b} {a} dc 0 ac 1",
            f"{self.shunt_source} 0 {a} dc 0 ac 0",
        ]

    def steps(self, ac_command: str, a: str, b: str) -> tuple[Step, ...]:
        """Run 1 of ``ac_command`` with the voltage injection (reads v(``a``) and v(``b``)),
        the two ``alter`` commands that swap the injections, and run 2 with the current
        injection (reads the series source's current)."""
        return (
            Step(ac_command, ("frequency", f"v({a})", f"v({b})")),
            Step(f"alter {self.series_source.lower()} acmag=0"),
            Step(f"alter {self.shunt_source.lower()} acmag=1"),
            Step(ac_command, ("frequency", self._series_current)),
        )

    def loop_gain(self, reads, a, b):
        """T from run 1's v(``b``) (``a`` is the amplifier side) and run 2's series-source current in
        ``reads`` (:func:`~amploop.analysis.loopgain.double_injection`)."""
        run1, run2 = reads[0], reads[3]
        values = double_injection(run1[f"v({b})"], run2[self._series_current])
        return FrequencyResponse(np.real(run1["frequency"]), values)

    def rerun_formula(self, a, b):
        """T = 1/(v(``b``) of run 1 − the series source's current of run 2) − 1
        (:func:`~amploop.analysis.loopgain.double_injection`; v(``a``) is implied by
        v(``b``) − v(``a``) = 1)."""
        return [f"let {RERUN_VECTOR} = 1/(ac1.v({b}) - ac2.{self._series_current}) - 1"]


@dataclass(frozen=True)
class LcBreak(Probe):
    """Large-L/large-C break with a voltage injection: one AC run, loading not preserved.

    Attributes
    ----------
    name
        The probe's name, as ``[analysis].probe`` gives it.
    inductance_h
        The inductor that closes the loop at DC and opens it at AC, henries.
    capacitance_f
        The capacitor that couples the AC source into side ``b``, farads.
    """

    name: str = "lc"
    inductance_h: float = 1e9
    capacitance_f: float = 1.0

    def elements(self, a: str, b: str) -> list[str]:
        """``Ltb_break`` from ``a`` to ``b``, and ``Ctb_drive`` from ``b`` to ``Vtb_drive``,
        an AC 1 source to ground."""
        return [
            f"Ltb_break {a} {b} {self.inductance_h:.17g}",
            f"Ctb_drive {b} tb_drive {self.capacitance_f:.17g}",
            "Vtb_drive tb_drive 0 dc 0 ac 1",
        ]

    def steps(self, ac_command: str, a: str, b: str) -> tuple[Step, ...]:
        """One run of ``ac_command``, reading v(``a``) and v(``b``)."""
        return (Step(ac_command, ("frequency", f"v({a})", f"v({b})")),)

    def loop_gain(self, reads, a, b):
        """T = −v(``a``)/v(``b``) from the one run in ``reads``
        (:func:`~amploop.analysis.loopgain.voltage_break`)."""
        run = reads[0]
        return FrequencyResponse(np.real(run["frequency"]),
                                 voltage_break(run[f"v({a})"], run[f"v({b})"]))

    def rerun_formula(self, a, b):
        """T = −v(``a``)/v(``b``) of the one run
        (:func:`~amploop.analysis.loopgain.voltage_break`)."""
        return [f"let {RERUN_VECTOR} = -v({a})/v({b})"]


def make_probe(kind: str) -> Probe:
    """The probe for ``kind``, a value of ``[analysis].probe``: ``"double-injection"`` or
    ``"lc"`` (ValueError for another)."""
    if kind == "double-injection":
        return DoubleInjection()
    if kind == "lc":
        return LcBreak()
    raise ValueError(f"unknown probe {kind!r}")
