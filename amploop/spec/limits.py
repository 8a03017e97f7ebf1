"""What the job asks to be measured and reached: the AC sweep and its probe, the targets,
the step check, and the limits that make a corner suspect. Units are SI (hertz,
seconds, volts), margins in degrees and dB."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

__all__ = ["OBJECTIVES", "Analysis", "Objective", "OperatingPointLimits", "ProbeKind", "Target",
           "Transient"]


ProbeKind = Literal["double-injection", "lc"]
#: What the map strategy optimises at the margin targets: the worst-corner unity-gain
#: frequency, or the worst-corner small-signal settling time.
Objective = Literal["bandwidth", "settling"]
OBJECTIVES = ("bandwidth", "settling")


@dataclass(frozen=True)
class OperatingPointLimits:
    """``[operating_point]``: when a measured corner counts as suspect.

    Attributes
    ----------
    min_dc_loop_gain_db
        The lowest DC loop gain a usable corner has, dB (default 20).
    max_output_shift
        How far the DC output may sit from the common mode, as a share of the supply span
        (the highest minus the lowest of the voltage sources on the ports and ground);
        default 0.1.
    """

    min_dc_loop_gain_db: float = 20.0
    max_output_shift: float = 0.1


@dataclass(frozen=True)
class Analysis:
    """``[analysis]``: the AC sweep, the probe and the per-analysis time limit.

    Attributes
    ----------
    start_hz, stop_hz
        The first and last frequency of the AC sweep, Hz.
    points_per_decade
        Points per decade of the sweep.
    probe
        The loop-gain probe: ``"double-injection"`` or ``"lc"``.
    time_limit_s
        Seconds one analysis may take before it counts as hung.
    """

    start_hz: float = 1.0
    stop_hz: float = 10e9
    points_per_decade: int = 40
    probe: ProbeKind = "double-injection"
    time_limit_s: float = 120.0

    def ac_command(self) -> str:
        """The ngspice ``ac dec`` command of this sweep."""
        from amploop.spice.units import spice_number

        return (
            f"ac dec {self.points_per_decade} {spice_number(self.start_hz)} "
            f"{spice_number(self.stop_hz)}"
        )


@dataclass(frozen=True)
class Target:
    """``[target]``: phase margin to reach (degrees), how far above it may land, minimum GM.

    Attributes
    ----------
    phase_margin_deg
        The phase margin the worst corner must reach, degrees.
    tolerance_deg
        How far above it the worst corner may land where the bounds allow, degrees.
    gain_margin_db
        The minimum gain margin at every corner, dB; None for no minimum.
    common_mode_phase_margin_deg, common_mode_gain_margin_db
        The same minimums for the common-mode feedback loop of a fully-differential
        amplifier, degrees and dB; None: that loop is measured, not targeted.
    sigma
        With ``[monte_carlo]``: per base corner, the mean minus ``sigma`` standard
        deviations of its samples' phase margins must reach ``phase_margin_deg`` (instead of
        every sample); None: no such rule.
    yield_fraction
        With ``[monte_carlo]``: per base corner, the lower end of the 95 % Clopper–Pearson
        interval of the fraction of samples meeting every target must reach this; None: no
        such rule. At most one of ``sigma`` and ``yield_fraction`` is given.
    objective
        What the map strategy maximises at these margins: ``"bandwidth"`` (the worst-corner
        unity-gain frequency, the default) or ``"settling"`` (it minimises the worst-corner
        small-signal settling time into ``[transient].band``).
    settling_time_s
        The longest small-signal settling time any corner may have, seconds (a constraint
        with either objective); None for no ceiling.
    """

    phase_margin_deg: float
    tolerance_deg: float = 1.0
    gain_margin_db: float | None = None
    common_mode_phase_margin_deg: float | None = None
    common_mode_gain_margin_db: float | None = None
    sigma: float | None = None
    yield_fraction: float | None = None

    @property
    def statistical(self) -> bool:
        """Whether the sampled corners are held to a statistical rule (``sigma`` or
        ``yield_fraction``) rather than each to the target."""
        return self.sigma is not None or self.yield_fraction is not None
    objective: Objective = "bandwidth"
    settling_time_s: float | None = None

    @property
    def needs_settling(self) -> bool:
        """Whether tuning predicts and verifies settling (the objective or a ceiling)."""
        return self.objective == "settling" or self.settling_time_s is not None


@dataclass(frozen=True)
class Transient:
    """``[transient]``: the closed-loop small-step check of the report.

    Attributes
    ----------
    step_v
        Input step at the signal source, volts (small, so the loop stays linear).
    band
        Settling band relative to the output step (0.001 = 0.1 %).
    stop_s
        Length of the run, seconds; None: 40/(2π·f_u) of the slowest corner.
    resistance_share
        With a MOSFET standing in for Rc: warn when its channel resistance moves by more
        than this share during the step.
    """

    step_v: float = 5e-3
    band: float = 1e-3
    stop_s: float | None = None
    resistance_share: float = 0.1
