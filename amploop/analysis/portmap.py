"""The compensation map from injections at the compensation elements' ports.

Put an AC current source J_i (DC 0, so the operating point is the same) across each
compensation element i of a reference circuit (Rc0, Cc0). By the substitution theorem,
changing element i from admittance Y0_i to Y_i is the same, for every small-signal
quantity, as driving J_i = (Y_i − Y0_i)·v_i, v_i the voltage across it (from its first
node to its second; J_i flows from the first node through the source to the second).
By superposition, in the reference circuit with the probe's excitation e_k of run k:

    v = A_k + B·J,    y_k = c_k + d_k·J

(v: the element voltages; y_k: what run k reads for the loop gain). With
J = Δ·v, Δ = diag(Y_i − Y0_i):

    v = (I − B·Δ)⁻¹·A_k,    y_k = c_k + d_k·Δ·v

exactly, at any values. A_k and c_k come from the probe's own runs at the reference
values; B and d from one run per port with only J_i on. Two ports (Rc and Cc apart)
hold the two-element case, whatever else sits on the node between them; one port across
the whole branch (Y = sCc/(1 + sCc·Rc)) holds the one-impedance case. For the double
injection u = 1/(1 + T) = y_1 − y_2 (v(b) of run 1 minus the series source's current of
run 2), so T = 1/u − 1.

An Rc below 1 mΩ is taken as 1 mΩ, as ngspice does with a resistor (restemp.c).
Pure functions on arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.loopgain import LoopGainMap

__all__ = ["R_MIN_OHM", "PortMap"]

#: The smallest resistance ngspice simulates, ohms (it replaces a smaller one by it).
R_MIN_OHM = 1e-3


def _admittances(form: str, s: np.ndarray, cc, rc) -> list[np.ndarray]:
    """Each port's admittance at Cc = ``cc`` (F) and Rc = ``rc`` (Ω), broadcast with
    ``s`` (rad/s, last axis)."""
    rc = np.maximum(rc, R_MIN_OHM)
    if form == "cc-only":
        return [s * cc]
    if form == "two-element":
        return [1.0 / rc + 0 * s, s * cc]
    return [s * cc / (1.0 + s * cc * rc)]


@dataclass(frozen=True)
class PortMap(LoopGainMap):
    """One corner's loop gain at every (Cc, Rc) from its port characterisation.

    Attributes
    ----------
    frequency_hz
        The analysis frequencies, Hz: shape (n_f,).
    form
        ``"two-element"`` (ports: Rc, then Cc), ``"one-impedance"`` (one port across
        the series branch) or ``"cc-only"`` (one port across Cc, Rc not tuned).
    reference
        (Cc in F, Rc in Ω) of the reference circuit.
    a
        Port voltages in the probe's two runs: shape (2, P, n_f).
    b
        Port voltages per unit J of each port: shape (P, P, n_f), [voltage, source].
    c
        What the two runs read for the loop gain: shape (2, n_f).
    d
        The same quantities per unit J: shape (2, P, n_f).
    """

    frequency_hz: np.ndarray
    form: str
    reference: tuple[float, float]
    a: np.ndarray
    b: np.ndarray
    c: np.ndarray
    d: np.ndarray

    def loop_gain_values(self, cc_f, rc_ohm, frequency_index=None) -> np.ndarray:
        """Complex T at every frequency for each (Cc, Rc); shape ``broadcast(cc, rc) + (n_f,)``.

        Parameters
        ----------
        cc_f
            Cc, farads (0: the branch is open).
        rc_ohm
            Rc, ohms; broadcast against ``cc_f``.
        frequency_index
            Picks a subset of the frequencies; None for all of them.
        """
        pick = slice(None) if frequency_index is None else frequency_index
        f = self.frequency_hz[pick]
        a, b, c, d = self.a[..., pick], self.b[..., pick], self.c[..., pick], self.d[..., pick]
        s = 2j * np.pi * f
        cc = np.asarray(cc_f, dtype=float)[..., None]
        rc = np.asarray(rc_ohm, dtype=float)[..., None]
        cc0, rc0 = self.reference
        delta = [y - y0 for y, y0 in zip(_admittances(self.form, s, cc, rc),
                                         _admittances(self.form, s, cc0, rc0))]
        y = []
        for k in range(2):
            if len(delta) == 1:
                v = a[k, 0] / (1.0 - b[0, 0] * delta[0])
                y.append(c[k] + d[k, 0] * delta[0] * v)
                continue
            # (I − B·Δ) v = A_k, 2 × 2, by Cramer's rule
            m11, m12 = 1.0 - b[0, 0] * delta[0], -b[0, 1] * delta[1]
            m21, m22 = -b[1, 0] * delta[0], 1.0 - b[1, 1] * delta[1]
            det = m11 * m22 - m12 * m21
            v1 = (a[k, 0] * m22 - m12 * a[k, 1]) / det
            v2 = (m11 * a[k, 1] - m21 * a[k, 0]) / det
            y.append(c[k] + d[k, 0] * delta[0] * v1 + d[k, 1] * delta[1] * v2)
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1.0 / (y[0] - y[1]) - 1.0
