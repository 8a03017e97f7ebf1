"""Textbook relations of the two-stage Miller amplifier, as pure functions.

Sources: the standard two-step compensation procedure as taught (e.g. P. R. Gray,
P. J. Hurst, S. H. Lewis, R. G. Meyer, "Analysis and Design of Analog Integrated
Circuits", ch. 9; B. Razavi, "Design of Analog CMOS Integrated Circuits", ch. 10), with
the feedback factor included because the loop, not the open amplifier, is compensated.
All quantities SI: siemens, farads, ohms, rad/s, degrees where named ``_deg``.
"""

from __future__ import annotations

import math

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse

__all__ = [
    "effective_load",
    "feedback_factor",
    "lead_ratio",
    "lead_resistor",
    "rhp_zero_rad_s",
    "starting_cc",
    "where_phase_is",
]


def feedback_factor(kind: str, z_in: float, z_fb: float, c_input: float = 0.0) -> float:
    """β of the configuration, ignoring the amplifier's own input capacitance.

    Resistive: β = Rin/(Rin + Rfb) (a capacitance at the inverting input is left out: it
    makes β fall with frequency). Capacitive: β = Cfb/(Cin + Cfb + Ci), the capacitive
    divider with Ci from the inverting input to ground (common practice). Unity: β = 1.

    Parameters
    ----------
    kind
        ``"resistive"``, ``"capacitive"`` or ``"unity"``.
    z_in
        Z1 from the signal source to the inverting input: Rin, ohms, or Cin, farads.
    z_fb
        Z2 from the output to the inverting input: Rfb, ohms, or Cfb, farads.
    c_input
        Ci, the capacitance from the inverting input to ground, farads.
    """
    if kind == "unity":
        return 1.0
    if kind == "resistive":
        return z_in / (z_in + z_fb)
    return z_fb / (z_in + z_fb + c_input)


def effective_load(kind: str, cl: float, z_in: float, z_fb: float,
                   c_input: float = 0.0) -> float:
    """The capacitance the output drives: CL plus, for a capacitive loop, Cin + Ci in series
    with Cfb; for a unity configuration CL + Ci (the inverting input is the output).

    Parameters
    ----------
    kind
        ``"resistive"``, ``"capacitive"`` or ``"unity"``.
    cl
        The load capacitance CL, farads.
    z_in, z_fb
        Z1 and Z2 of the feedback network: ohms (resistive) or farads (capacitive; Cin
        and Cfb).
    c_input
        Ci, the capacitance from the inverting input to ground, farads.
    """
    if kind == "unity":
        return cl + c_input
    if kind == "capacitive" and z_in + z_fb + c_input > 0:
        return cl + (z_in + c_input) * z_fb / (z_in + z_fb + c_input)
    return cl


def starting_cc(beta: float, gm1: float, cl_eff: float, gm2: float) -> float:
    """Cc = β·gm1·CL,eff/gm2: puts the loop's crossover β·gm1/Cc at the second pole gm2/CL,eff,
    about 45° of phase margin on a two-pole loop (more once the pole splitting is counted).

    Parameters
    ----------
    beta
        The feedback factor β (:func:`feedback_factor`).
    gm1
        Transconductance of the input pair's transistor, siemens.
    cl_eff
        The capacitance the output drives (:func:`effective_load`), farads.
    gm2
        Transconductance of the second-stage driver, siemens.

    Returns
    -------
    float
        Cc, farads.
    """
    return beta * gm1 * cl_eff / gm2


def lead_ratio(lead_share_deg: float) -> float:
    """k such that a zero at k·ωt adds ``lead_share_deg`` at ωt: k = 1/tan(lead)
    (a zero at k·ωt adds atan(1/k); k ≈ 1.7 for 30°)."""
    return 1.0 / math.tan(math.radians(lead_share_deg))


def lead_resistor(gm2: float, k: float, omega_t: float, cc: float) -> float:
    """Rc = 1/gm2 + 1/(k·ωt·Cc): cancels the right-half-plane zero (the 1/gm2 part) and puts
    a left-half-plane zero at k·ωt.

    Parameters
    ----------
    gm2
        Transconductance of the second-stage driver, siemens.
    k
        Where the zero goes, as a multiple of ωt (:func:`lead_ratio`).
    omega_t
        The loop's unity-gain frequency ωt, rad/s.
    cc
        Cc, farads.

    Returns
    -------
    float
        Rc, ohms.
    """
    return 1.0 / gm2 + 1.0 / (k * omega_t * cc)


def rhp_zero_rad_s(cc: float, gm2: float, rc: float) -> float:
    """ωz = 1/(Cc·(1/gm2 − Rc)): positive is a right-half-plane zero, negative a left one,
    infinite when Rc = 1/gm2.

    Parameters
    ----------
    cc
        Cc, farads.
    gm2
        Transconductance of the second-stage driver, siemens.
    rc
        Rc, ohms.

    Returns
    -------
    float
        ωz, rad/s.
    """
    denominator = cc * (1.0 / gm2 - rc)
    return math.inf if denominator == 0 else 1.0 / denominator


def where_phase_is(response: FrequencyResponse, phase_deg: float) -> tuple[float, float] | None:
    """The first frequency (Hz) where the unwrapped phase falls to ``phase_deg``, and |T| there.

    Linear interpolation in log-frequency between samples; None if the phase never gets there.

    Parameters
    ----------
    response
        A loop gain.
    phase_deg
        The phase to find, degrees (unwrapped from DC, e.g. −155).
    """
    phase = response.phase_deg
    x = np.log10(response.frequency_hz)
    below = np.nonzero(phase <= phase_deg)[0]
    if below.size == 0:
        return None
    k = int(below[0])
    if k == 0:
        return float(response.frequency_hz[0]), float(abs(response.values[0]))
    t = (phase[k - 1] - phase_deg) / (phase[k - 1] - phase[k])
    x_at = x[k - 1] + t * (x[k] - x[k - 1])
    log_mag = np.log(np.abs(response.values))
    magnitude = math.exp(log_mag[k - 1] + t * (log_mag[k] - log_mag[k - 1]))
    return float(10.0**x_at), float(magnitude)
