"""Each corner's DC operating point, and the checks that tell a usable corner from one
whose margins describe a broken bias point.

The operating point comes from the loop-gain analysis itself: the deck sets ngspice's
``keepopinfo`` option, so the AC analysis keeps the operating point it solved as a plot of
its own (``op1``), and one more command after the AC runs (``setplot op1``) reads the
output, the common mode, the supplies and, for the job's ``input_device`` and
``second_stage_device``, the MOSFET quantities ``vds`` and ``vdsat`` that the device
models report (BSIM4 and level 1 both do). No extra analysis is run.

A device counts as saturated when |VDS| ≥ |VDSAT| (common practice: the square-law and
BSIM saturation condition; BSIM4's VDSAT includes velocity saturation). The output
should sit at the common mode: the testbench's signal source sits there and the loop
forces the output to follow it at DC for either feedback kind.

A corner whose margins were read is ``"suspect"`` rather than ``"ok"`` when its DC loop
gain is below ``[operating_point].min_dc_loop_gain`` (default 20 dB), its output sits
further from the common mode than ``[operating_point].max_output_shift`` times the supply
span (default 0.1), or a named device is out of saturation.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from amploop.bench.nodes import NODE_AMP, NODE_AMP_N, bias_node
from amploop.bench.requests import Step
from amploop.spec.limits import OperatingPointLimits
from amploop.spice.units import engineering

if TYPE_CHECKING:
    from amploop.analysis.loopgain import FrequencyResponse
    from amploop.analysis.margins import Margins
    from amploop.bench.amplifier import Amplifier

__all__ = ["DeviceRegion", "OperatingPoint", "OperatingPointProbe", "corner_status", "device_vector", "status_label", "warning_advice"]

#: The plot ngspice makes of the first AC analysis's operating point (``keepopinfo``).
OP_PLOT = "op1"
#: The deck line that keeps it.
KEEP_OP_LINE = ".options keepopinfo"

#: How far an input must sit from the common mode to count as moved, volts (a choice:
#: well above the offsets of a working amplifier's loop, well below a latched one's).
INPUT_SHIFT_V = 1e-3

_ROLES = ("input_device", "second_stage_device")


def device_vector(name: str, quantity: str) -> str:
    """ngspice's name of the operating-point ``quantity`` of the device ``name`` inside the
    testbench's X1 (``"M1"`` -> ``"@m.x1.m1[vds]"``; ``"xpair.m1"`` -> ``"@m.x1.xpair.m1[vds]"``)."""
    path = name.lower()
    return f"@{path.split('.')[-1][:1]}.x1.{path}[{quantity}]"


@dataclass(frozen=True)
class DeviceRegion:
    """One named device at the operating point.

    Attributes
    ----------
    role
        ``"input_device"`` or ``"second_stage_device"``.
    name
        The device as the job names it.
    vds_v, vdsat_v
        Its drain-source and saturation voltages, volts (as the model reports them; the
        check uses magnitudes); None when the model does not give them.
    """

    role: str
    name: str
    vds_v: float | None
    vdsat_v: float | None

    @property
    def saturated(self) -> bool | None:
        """|VDS| ≥ |VDSAT| with a channel there (VDSAT ≠ 0); None when either is unknown."""
        if self.vds_v is None or self.vdsat_v is None:
            return None
        return self.vdsat_v != 0 and abs(self.vds_v) >= abs(self.vdsat_v)

    @property
    def region(self) -> str | None:
        """``"saturation"``, ``"triode"``, ``"off"`` (the model reports VDSAT = 0: no
        channel, as level 1 does below threshold), or None when unknown."""
        if self.saturated is None:
            return None
        if self.vdsat_v == 0:
            return "off"
        return "saturation" if self.saturated else "triode"

    def as_json(self) -> dict:
        """The device's entry in ``operating_point.devices`` of results.json."""
        return {"role": self.role, "name": self.name, "vds_v": self.vds_v,
                "vdsat_v": self.vdsat_v, "region": self.region}


@dataclass(frozen=True)
class OperatingPoint:
    """One corner's DC operating point.

    Attributes
    ----------
    output_v
        The DC output voltage, volts; None when it could not be read.
    common_mode_v
        The input common mode, volts.
    inverting_input_v
        The inverting input's DC voltage, volts.
    supply_span_v
        The highest minus the lowest voltage of the supply ports and ground, volts; None
        without a voltage source on a port.
    devices
        The job's named devices, in the order input, second stage.
    output_n_v
        The second output's DC voltage of a fully-differential amplifier, volts; None for
        a single-ended one.
    """

    output_v: float | None
    common_mode_v: float | None
    supply_span_v: float | None
    devices: tuple[DeviceRegion, ...] = ()
    inverting_input_v: float | None = None
    output_n_v: float | None = None

    @property
    def output_shift_v(self) -> float | None:
        """Output minus common mode, volts."""
        if self.output_v is None or self.common_mode_v is None:
            return None
        return self.output_v - self.common_mode_v

    @property
    def drives_like_positive_feedback(self) -> bool | None:
        """True when the output has moved off the common mode the same way as the
        inverting input (each by more than :data:`INPUT_SHIFT_V`): an amplifier whose
        inverting input really is inverting, driven into a rail, has its inverting input
        on the other side of the common mode (it takes v(in_p) − v(in_n) of the output's
        sign to hold the output there), so this is what swapped inputs that latched the
        loop look like. None when a voltage is unknown."""
        shift = self.output_shift_v
        if shift is None or self.inverting_input_v is None:
            return None
        input_shift = self.inverting_input_v - self.common_mode_v
        return bool(abs(input_shift) > INPUT_SHIFT_V and abs(shift) > INPUT_SHIFT_V
                    and (shift > 0) == (input_shift > 0))

    def as_json(self) -> dict:
        """The corner's ``operating_point`` entry in results.json."""
        data = {"output_v": self.output_v, "common_mode_v": self.common_mode_v,
                "output_shift_v": self.output_shift_v,
                "inverting_input_v": self.inverting_input_v,
                "supply_span_v": self.supply_span_v,
                "devices": [d.as_json() for d in self.devices]}
        if self.output_n_v is not None:
            data["output_n_v"] = self.output_n_v
        return data

    def problems(self, limits: OperatingPointLimits) -> list[str]:
        """What is wrong with it against ``limits`` (the job's ``[operating_point]``), one
        clause each (empty: nothing found)."""
        found = []
        span = self.supply_span_v
        outputs = [("the DC output", self.output_v)]
        if self.output_n_v is not None:
            outputs = [("the first output", self.output_v), ("the second output", self.output_n_v)]
        for what, volts in outputs:
            if volts is None or self.common_mode_v is None or span is None:
                continue
            shift = volts - self.common_mode_v
            if abs(shift) > limits.max_output_shift * span:
                found.append(
                    f"{what} sits at {engineering(volts, 'V')}, "
                    f"{engineering(abs(shift), 'V')} {'above' if shift > 0 else 'below'} the "
                    f"{engineering(self.common_mode_v, 'V')} common mode, more than "
                    f"{limits.max_output_shift:.0%} of the {engineering(span, 'V')} supply span")
        for device in self.devices:
            if device.region == "off":
                found.append(f"{device.name} ({device.role}) is off, its model reporting "
                             "VDSAT = 0 V (no channel)")
            elif device.saturated is False:
                found.append(
                    f"{device.name} ({device.role}) is in triode, |VDS| "
                    f"{engineering(abs(device.vds_v), 'V')} < VDSAT "
                    f"{engineering(abs(device.vdsat_v), 'V')}")
        return found


@dataclass(frozen=True)
class OperatingPointProbe:
    """What the loop-gain deck reads of its operating point, and how it is judged.

    Attributes
    ----------
    output, common_mode, inverting_input
        The vectors of the output, the common-mode source's node and the inverting input.
    output_n
        The second output's vector of a fully-differential amplifier; None otherwise.
    supplies
        The vectors of the ports driven by voltage sources.
    devices
        ``(role, name)`` of each device the job names.
    limits
        The job's ``[operating_point]`` limits.
    """

    output: str
    common_mode: str | None
    supplies: tuple[str, ...]
    devices: tuple[tuple[str, str], ...]
    limits: OperatingPointLimits
    inverting_input: str | None = "v(tb_inn)"
    output_n: str | None = None

    @classmethod
    def for_amplifier(cls, amplifier: Amplifier) -> OperatingPointProbe:
        """The read-out for ``amplifier``'s testbench."""

        job = amplifier.job
        tied = (bias_node(job.bias, s.port) for s in job.bias.sources if s.kind == "volts")
        supplies = tuple(dict.fromkeys(f"v({node})" for node in tied if node != "0"))
        devices = tuple((role, getattr(job.amplifier, role)) for role in _ROLES
                        if getattr(job.amplifier, role))
        if job.testbench is not None:  # the user's deck: no common mode known to amploop
            return cls(output=f"v({NODE_AMP})", common_mode=None, supplies=(),
                       devices=devices, limits=job.operating_point, inverting_input=None)
        if job.amplifier.fully_differential:  # the CMFB reference, or the signal source
            reference = job.amplifier.common_mode_reference
            common_mode = f"v({bias_node(job.bias, reference)})" if reference else "v(tb_sig)"
            return cls(output=f"v({NODE_AMP})", common_mode=common_mode, supplies=supplies,
                       devices=devices, limits=job.operating_point,
                       output_n=f"v({NODE_AMP_N})")
        return cls(output=f"v({NODE_AMP})", common_mode="v(tb_inp)", supplies=supplies,
                   devices=devices, limits=job.operating_point)

    def step(self) -> Step:
        """The command that reads the operating point after the AC runs (optional: a
        model without ``vdsat`` leaves that device's region unknown, never the loop gain
        unread)."""
        reads = [v for v in (self.output, self.common_mode, self.inverting_input) if v]
        reads += self.supplies
        if self.output_n is not None:
            reads.append(self.output_n)
        for _, name in self.devices:
            reads += [device_vector(name, "vds"), device_vector(name, "vdsat")]
        return Step(f"setplot {OP_PLOT}", tuple(dict.fromkeys(reads)), optional=True)

    def read(self, values: dict[str, np.ndarray]) -> OperatingPoint | None:
        """The operating point from ``values``, the vectors the :meth:`step` read (name ->
        array); None when none were read."""
        if not values:
            return None

        def value(name: str | None) -> float | None:
            vector = values.get(name) if name else None
            return None if vector is None or vector.size == 0 else float(np.real(vector[0]))

        supplies = [v for v in (value(n) for n in self.supplies) if v is not None]
        span = max([0.0, *supplies]) - min([0.0, *supplies]) if supplies else None
        devices = tuple(DeviceRegion(role, name, value(device_vector(name, "vds")),
                                     value(device_vector(name, "vdsat")))
                        for role, name in self.devices)
        return OperatingPoint(output_v=value(self.output), common_mode_v=value(self.common_mode),
                              supply_span_v=span or None, devices=devices,
                              inverting_input_v=value(self.inverting_input),
                              output_n_v=self.output_n and value(self.output_n))


_BROKEN_ADVICE = ("check what sets the DC level at the inverting input (a dc_path too large "
                  "for the gate leakage), the bias currents and the supplies")


def corner_status(response: FrequencyResponse, margins: Margins, op: OperatingPoint | None,
                  limits: OperatingPointLimits) -> tuple[str, str | None]:
    """A measured corner's status and its one-sentence reason.

    Parameters
    ----------
    response
        The corner's loop gain.
    margins
        Its margins (:func:`~amploop.analysis.margins.loop_margins`).
    op
        Its operating point; None when it could not be read.
    limits
        The job's ``[operating_point]`` limits.

    Returns
    -------
    status, reason
        ``("ok", None)``; ``("suspect", why)`` when the margins exist but the operating
        point behind them is broken or the DC loop gain is below the limit; ``("error",
        why)`` when the loop gain gives no margins (positive feedback at DC, no 0 dB
        crossing). Swapped inputs are suggested only when the operating point is sound
        and the loop gain is above 0 dB at DC: what a swap of a working amplifier gives.
    """
    broken = op.problems(limits) if op is not None else []
    if broken and op.drives_like_positive_feedback:
        cause = (f"; the operating point is latched ({'; '.join(broken)}), the output "
                 f"{engineering(abs(op.output_shift_v), 'V')} and the inverting input "
                 f"{engineering(abs(op.inverting_input_v - op.common_mode_v), 'V')} both "
                 f"{'above' if op.output_shift_v > 0 else 'below'} the common mode: positive "
                 f"feedback; are in_p and in_n swapped?")
    else:
        cause = f"; the operating point is broken ({'; '.join(broken)}): {_BROKEN_ADVICE}"
    f0, f1 = response.frequency_hz[0], response.frequency_hz[-1]
    dc_db, dc_phase = margins.dc_loop_gain_db, float(response.phase_deg[0])
    if abs(dc_phase) > 90.0:
        start = (f"the loop gain is negative at {engineering(f0, 'Hz')} (phase "
                 f"{dc_phase:.0f}°, |T| {dc_db:.1f} dB)")
        if broken:
            return "error", start + cause
        if op is not None and op.output_shift_v is not None and dc_db > 0:
            return "error", (start + " with the output at the common mode: positive "
                             "feedback; are in_p and in_n swapped?")
        return "error", start + ": check the feedback network and the ports"
    if margins.unity_gain_hz is None:
        start = (f"the loop gain never crosses 0 dB between {engineering(f0, 'Hz')} and "
                 f"{engineering(f1, 'Hz')} (|T| from {response.magnitude_db[0]:.1f} dB to "
                 f"{response.magnitude_db[-1]:.1f} dB)")
        if broken:
            return "error", start + cause
        if float(np.max(response.magnitude_db)) < 0:
            return "error", start + ("; it stays below 0 dB at every frequency, as where "
                                     "nothing loops back through the break: is the break on "
                                     "the feedback loop, and the feedback network connected?")
        return "error", start + "; widen [analysis].start/stop or check the feedback network"
    if broken:
        return "suspect", "these margins do not describe the amplifier" + cause
    if dc_db < limits.min_dc_loop_gain_db:
        return "suspect", (f"the DC loop gain is only {dc_db:.1f} dB (below "
                           f"{limits.min_dc_loop_gain_db:g} dB, [operating_point]."
                           "min_dc_loop_gain), too little for the margins to mean much; "
                           "check the bias and the devices' regions")
    return "ok", None


#: What a simulator warning means and what to check, said once per run.
_ADVICE = {
    "gmin stepping": (
        "ngspice's direct Newton iteration found no DC operating point and gmin stepping "
        "(a conductance from every node to ground, removed step by step) reached one; that "
        "point can be right, but a circuit that needs it often has a node with almost no "
        "DC path (a large dc_path or bias resistor, gate leakage) or more than one DC "
        "solution: amploop checked the output against the common mode and the named "
        "devices' regions (a corner that fails is SUSPECT), so check the other devices' "
        "regions and look for such a node"),
    "transient fallback": (
        "ngspice reached the DC operating point only through a transient run, so it "
        "depends slightly on the capacitors, Cc included: check the corner's DC output "
        "and devices, and look for a node without a DC path"),
}


def warning_advice(warning: str) -> str | None:
    """What the simulator warning ``warning`` means and what to check; None when there is
    nothing to add to the warning itself."""
    return next((text for key, text in _ADVICE.items() if key in warning), None)


def status_label(status: str, warnings) -> str:
    """A corner's ``status`` for a table: ``ok``, ``SUSPECT`` or ``ERROR``, followed by
    ``gmin`` when one of its ``warnings`` says the operating point needed gmin stepping."""
    text = {"ok": "ok", "suspect": "SUSPECT"}.get(status, "ERROR")
    return text + (" gmin" if any("gmin stepping" in w for w in warnings) else "")
