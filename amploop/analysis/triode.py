"""A MOSFET in triode standing in for the lead resistor: pure relations.

Square-law (Shichman–Hodges) triode at VDS → 0 (A. S. Sedra, K. C. Smith,
"Microelectronic Circuits", ch. 5; the ngspice manual's level-1 MOSFET):

    I_D = µCox·(W/L)·((VGS − VT)·VDS − VDS²/2),   g_ds = ∂I_D/∂VDS = µCox·(W/L)·(VGS − VT − VDS)

so at VDS = 0 the channel resistance is R_on = 1/(µCox·(W/L)·(VGS − VT)): inversely
proportional to W and to the multiplier m, proportional to L. Between sizes the tuner
scales the simulator's own conductance by this law; the simulator's conductance at the
chosen size decides (verification).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "in_triode",
    "resistance_at_size",
    "resistance_share_during",
    "size_for_resistance",
    "square_law_resistance",
]


def square_law_resistance(kp: float, w: float, l: float, vov: float) -> float:
    """R_on = 1/(KP·(W/L)·(VGS − VT)) in ohms (KP = µCox in A/V², sizes in m, VOV in V).

    Parameters
    ----------
    kp
        KP = µCox, A/V².
    w, l
        Channel width and length, metres.
    vov
        Overdrive VGS − VT, volts; inf is returned when it is not above 0.
    """
    if vov <= 0:
        return float("inf")
    return 1.0 / (kp * (w / l) * vov)


def resistance_at_size(r_ref: float, size_ref: float, size, kind: str):
    """Channel resistance at ``size`` given ``r_ref`` at ``size_ref`` (square-law scaling).

    ``kind`` is ``"w"`` or ``"m"`` (R ∝ 1/size) or ``"l"`` (R ∝ size).

    Parameters
    ----------
    r_ref
        The channel resistance at ``size_ref``, ohms.
    size_ref
        The size it was read at (metres, or a count for ``m``).
    size
        The size or sizes wanted (an array gives an array).
    kind
        Which size: ``"w"``, ``"l"`` or ``"m"``.
    """
    size = np.asarray(size, dtype=float)
    if kind == "l":
        return r_ref * size / size_ref
    return r_ref * size_ref / size


def size_for_resistance(r_ref: float, size_ref: float, r: float, kind: str) -> float:
    """The size that gives resistance ``r``: the inverse of :func:`resistance_at_size`.

    Parameters
    ----------
    r_ref, size_ref, kind
        As for :func:`resistance_at_size`.
    r
        The resistance wanted, ohms.
    """
    if kind == "l":
        return size_ref * r / r_ref
    return size_ref * r_ref / r


def in_triode(vgs: float, vds: float, vdsat: float) -> bool:
    """On, and |VDS| below VDSAT = VGS − VT (for either polarity).

    Parameters
    ----------
    vgs, vds, vdsat
        The operating point's VGS, VDS and VDSAT, volts, signed as the simulator gives
        them; |VDSAT| must exceed 1 mV and have the sign of VGS.
    """
    return abs(vdsat) > 1e-3 and abs(vds) < abs(vdsat) and vgs * vdsat >= 0


def resistance_share_during(vgs_t: np.ndarray, vds_t: np.ndarray, vt: float) -> float:
    """Largest relative change of the channel resistance over a transient (square law).

    g_ds(t) ∝ VGS(t) − VT − VDS(t); returns max |g_ds(0)/g_ds(t) − 1|.

    Parameters
    ----------
    vgs_t, vds_t
        VGS and VDS of the device over the transient, volts, at the same times; the first
        sample is the reference.
    vt
        The threshold voltage VT, volts (signed as the simulator gives it).

    Returns
    -------
    float
        The largest relative change; inf when the channel is off at the start or turns
        off during the transient.
    """
    vgs_t = np.asarray(vgs_t, dtype=float)
    vds_t = np.asarray(vds_t, dtype=float)
    sign = np.sign(vgs_t[0] - vt) or 1.0
    g = sign * (vgs_t - vt - vds_t)
    g0 = g[0]
    if g0 <= 0:
        return float("inf")
    with np.errstate(divide="ignore"):
        ratio = np.where(g > 0, g0 / g, np.inf)
    return float(np.max(np.abs(ratio - 1.0)))
