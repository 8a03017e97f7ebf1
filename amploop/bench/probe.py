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

__all__ = ["RERUN_VECTOR", "DifferentialInjection", "DoubleInjection", "LcBreak", "Probe", "make_probe"]

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
    series_source, shunt_source
        The names of the series voltage and the shunt current injection source.
    starts_on
        Whether the deck starts with the series injection on (AC 1); a probe that runs
        after another one's starts with it off and switches it on in its first step.
    first_plot
        The number of ngspice's plot its first AC run makes (``ac1``, ``ac2``, …), for the
        hand-runnable deck's formula.
    """

    name: str = "double-injection"
    series_source: str = "Vtb_series"
    shunt_source: str = "Itb_shunt"
    starts_on: bool = True
    first_plot: int = 1

    @property
    def _series_current(self) -> str:
        """ngspice's vector of the series source's branch current."""
        return f"i({self.series_source.lower()})"

    def elements(self, a: str, b: str) -> list[str]:
        """The series source with its + terminal at ``b`` and its − at ``a`` (AC 1, or 0
        until its first step when it does not start on), and the shunt source from ground
        into ``a`` (AC 0 until the second run)."""
        return [
            f"{self.series_source} {b} {a} dc 0 ac {1 if self.starts_on else 0}",
            f"{self.shunt_source} 0 {a} dc 0 ac 0",
        ]

    def steps(self, ac_command: str, a: str, b: str) -> tuple[Step, ...]:
        """Run 1 of ``ac_command`` with the voltage injection (reads v(``a``) and v(``b``)),
        the two ``alter`` commands that swap the injections, and run 2 with the current
        injection (reads the series source's current)."""
        switch_on = () if self.starts_on else (
            Step(f"alter {self.series_source.lower()} acmag=1"),)
        return switch_on + (
            Step(ac_command, ("frequency", f"v({a})", f"v({b})")),
            Step(f"alter {self.series_source.lower()} acmag=0"),
            Step(f"alter {self.shunt_source.lower()} acmag=1"),
            Step(ac_command, ("frequency", self._series_current)),
        )

    def off_steps(self) -> tuple[Step, ...]:
        """The command that leaves the deck with neither injection on, after :meth:`steps`."""
        return (Step(f"alter {self.shunt_source.lower()} acmag=0"),)

    def loop_gain(self, reads, a, b):
        """T from run 1's v(``b``) (``a`` is the amplifier side) and run 2's series-source current in
        ``reads`` (:func:`~amploop.analysis.loopgain.double_injection`)."""
        first = 0 if self.starts_on else 1  # after the step that switches it on
        run1, run2 = reads[first], reads[first + 3]
        values = double_injection(run1[f"v({b})"], run2[self._series_current])
        return FrequencyResponse(np.real(run1["frequency"]), values)

    def rerun_formula(self, a, b, vector: str = RERUN_VECTOR):
        """T = 1/(v(``b``) of run 1 − the series source's current of run 2) − 1
        (:func:`~amploop.analysis.loopgain.double_injection`; v(``a``) is implied by
        v(``b``) − v(``a``) = 1), into ``vector``."""
        run1, run2 = f"ac{self.first_plot}", f"ac{self.first_plot + 1}"
        return [f"let {vector} = 1/({run1}.v({b}) - {run2}.{self._series_current}) - 1"]


@dataclass(frozen=True)
class DifferentialInjection(Probe):
    """Double injection at both outputs of a fully-differential amplifier, in anti-phase.

    Each output gets a series voltage source and a shunt current source, as
    :class:`DoubleInjection` does; run 1 drives the series sources with +½ and −½, run 2
    the shunt sources with +½ and −½ (into the ``a`` side of the first output and out of
    the second's). In the differential half circuit of a symmetric amplifier these are a
    unit injection, and the half circuit's own double injection formula gives

        T_d = 1 / ((v(b) − v(b_n)) of run 1 − (i_p + i_n) of run 2) − 1,

    with i_p and i_n the series sources' branch currents as ngspice reports them (the
    second one is written the other way round, + at its amplifier side, so that its
    current is the first one's mirror image). For a symmetric circuit this is exactly the
    differential-mode loop gain; with mismatched halves it is the loop gain of the
    differential part of the response to a purely differential injection (the common
    mode it stirs up is left out).

    Attributes
    ----------
    name
        The probe's name, as ``[analysis].probe`` gives it.
    a_n, b_n
        The amplifier side and the feedback side of the second output's break.
    series, shunt
        The names of the two series voltage sources and the two shunt current sources,
        first output's first.
    """

    name: str = "double-injection"
    a_n: str = "tb_outn"
    b_n: str = "tb_fbn"
    series: tuple[str, str] = ("Vtb_series", "Vtb_series_n")
    shunt: tuple[str, str] = ("Itb_shunt", "Itb_shunt_n")

    def _currents(self) -> tuple[str, str]:
        return tuple(f"i({name.lower()})" for name in self.series)

    def elements(self, a: str, b: str) -> list[str]:
        """Both outputs' series sources (AC ½ each, the second written + at its amplifier
        side) and shunt sources (AC 0 until the second run); ``a`` and ``b`` are the first
        output's amplifier and feedback side."""
        return [
            f"{self.series[0]} {b} {a} dc 0 ac 0.5",
            f"{self.series[1]} {self.a_n} {self.b_n} dc 0 ac 0.5",
            f"{self.shunt[0]} 0 {a} dc 0 ac 0",
            f"{self.shunt[1]} {self.a_n} 0 dc 0 ac 0",
        ]

    def steps(self, ac_command: str, a: str, b: str) -> tuple[Step, ...]:
        """Run 1 of ``ac_command`` (reads v(``b``) and v(``b_n``); ``a`` is implied), the
        ``alter`` commands that swap the injections, run 2 (reads both series sources'
        currents)."""
        return (
            Step(ac_command, ("frequency", f"v({b})", f"v({self.b_n})")),
            *[Step(f"alter {name.lower()} acmag=0") for name in self.series],
            *[Step(f"alter {name.lower()} acmag=0.5") for name in self.shunt],
            Step(ac_command, ("frequency", *self._currents())),
        )

    def off_steps(self) -> tuple[Step, ...]:
        """The commands that leave the deck with no injection on, after :meth:`steps`."""
        return tuple(Step(f"alter {name.lower()} acmag=0") for name in self.shunt)

    def loop_gain(self, reads, a, b):
        """T_d from run 1's v(``b``), v(``b_n``) and run 2's currents in ``reads``
        (the formula above, ``a`` implied; :func:`~amploop.analysis.loopgain.double_injection`)."""
        run1, run2 = reads[0], reads[5]
        i_p, i_n = self._currents()
        values = double_injection(run1[f"v({b})"] - run1[f"v({self.b_n})"],
                                  run2[i_p] + run2[i_n])
        return FrequencyResponse(np.real(run1["frequency"]), values)

    def rerun_formula(self, a, b, vector: str = RERUN_VECTOR):
        """T_d = 1/((v(``b``) − v(``b_n``)) of run 1 − (i_p + i_n) of run 2) − 1, into
        ``vector`` (``a`` implied)."""
        i_p, i_n = self._currents()
        return [(f"let {vector} = 1/((ac1.v({b}) - ac1.v({self.b_n})) - (ac2.{i_p} + "
                 f"ac2.{i_n})) - 1")]


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
