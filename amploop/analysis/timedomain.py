"""Step-response figures of the closed loop: overshoot and settling time. Pure functions.

A small input step keeps the amplifier linear, so these figures show what the phase
margin means in time: a second-order closed loop with damping ζ overshoots by
exp(−πζ/√(1−ζ²)) (K. Ogata, "Modern Control Engineering", ch. 5), and a one-pole loop
settles to a band ε in ln(1/ε)·τ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "StepMetrics",
    "damping_from_phase_margin",
    "overshoot_from_damping",
    "step_metrics",
    "suggested_stop_s",
]


@dataclass(frozen=True)
class StepMetrics:
    """Figures of one step response.

    Attributes
    ----------
    initial_v, final_v
        Output before the step and at the end of the run, volts.
    overshoot_pct
        How far the output goes past its final value, in % of the output step (0 when it
        never does).
    settling_s
        Time from the step until the output stays within ``band`` of the output step
        around its final value, seconds; None when it has not settled by the end.
    band
        The relative settling band used (0.001 = 0.1 %).
    """

    initial_v: float
    final_v: float
    overshoot_pct: float
    settling_s: float | None
    band: float


def step_metrics(time_s: np.ndarray, output_v: np.ndarray, step_at_s: float,
                 band: float = 1e-3, final_fraction: float = 0.05) -> StepMetrics:
    """Overshoot and settling time of a step response.

    Parameters
    ----------
    time_s, output_v
        The transient, seconds and volts (time increasing).
    step_at_s
        When the input step happens.
    band
        Settling band relative to the output step (default 0.1 %).
    final_fraction
        The final value is the mean over this last fraction of the run.

    Returns
    -------
    StepMetrics
    """
    t = np.asarray(time_s, dtype=float)
    v = np.asarray(output_v, dtype=float)
    before = v[t <= step_at_s]
    initial = float(before[-1]) if before.size else float(v[0])
    tail = v[t >= t[-1] - final_fraction * (t[-1] - step_at_s)]
    final = float(np.mean(tail))
    change = final - initial
    after = t >= step_at_s
    if change == 0 or not after.any():
        return StepMetrics(initial, final, 0.0, None, band)
    excursion = (v[after] - final) / change  # > 0: beyond the final value
    overshoot = max(0.0, float(np.max(excursion)) * 100.0)
    outside = np.abs((v - final) / change) > band
    outside[~after] = False
    if not outside.any():
        settling = 0.0
    else:
        last = int(np.nonzero(outside)[0][-1])
        if last + 1 >= t.size:
            settling = None
        else:
            # interpolate where the excursion comes back inside the band
            e0 = abs((v[last] - final) / change)
            e1 = abs((v[last + 1] - final) / change)
            fraction = (e0 - band) / (e0 - e1) if e0 != e1 else 0.0
            settling = float(t[last] + fraction * (t[last + 1] - t[last]) - step_at_s)
    return StepMetrics(initial, final, overshoot, settling, band)


def damping_from_phase_margin(pm_deg: float) -> float:
    """ζ of the standard second-order loop ωn²/(s(s + 2ζωn)) with phase margin ``pm_deg``.

    Inverts PM = atan(2ζ / √(√(1 + 4ζ⁴) − 2ζ²)) (Ogata) by bisection.

    Parameters
    ----------
    pm_deg
        The phase margin, degrees.
    """
    target = math.radians(pm_deg)

    def pm_of(zeta: float) -> float:
        return math.atan(2 * zeta / math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2))

    lo, hi = 1e-6, 10.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if pm_of(mid) < target:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def overshoot_from_damping(zeta: float) -> float:
    """Percent overshoot exp(−πζ/√(1−ζ²))·100 of a second-order step with damping ζ =
    ``zeta`` (0 for ζ ≥ 1)."""
    if zeta >= 1:
        return 0.0
    return 100.0 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2))


def suggested_stop_s(unity_gain_hz: float, settle_constants: float = 40.0) -> float:
    """A transient length, seconds, that lets a loop with crossover f_u = ``unity_gain_hz``
    (Hz) settle: ``settle_constants`` / (2π·f_u), 40 time constants by default."""
    return settle_constants / (2 * math.pi * unity_gain_hz)
