"""Exact small-signal loop gain of the linear two-stage macromodel, by nodal analysis.

The reference the measurement tests compare against. It uses nothing of amploop: the
admittance matrix of the closed loop is written out here, and the loop gain is Bode's
return ratio of the first-stage transconductance,

    T = Δ / Δ⁰ − 1,

with Δ the determinant of the nodal admittance matrix and Δ⁰ the same with gm1 set to
zero (H. W. Bode, "Network Analysis and Feedback Amplifier Design", 1945, ch. 4; the
two-stage small-signal model is the textbook one, e.g. Gray, Hurst, Lewis, Meyer,
"Analysis and Design of Analog Integrated Circuits", ch. 9). Every loop through the
feedback network passes through gm1 and through the output node, so this return ratio
is the loop gain at the output break point.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np


@dataclass(frozen=True)
class Macromodel:
    """Element values (SI) of the macromodel and its loop; invented for the tests."""

    gm1: float = 100e-6
    r1: float = 1e6
    c1: float = 50e-15
    gm2: float = 1e-3
    r2: float = 100e3
    c2: float = 100e-15
    cc: float = 1e-12
    rc: float = 0.0
    cl: float = 2e-12
    kind: str = "resistive"  # or "capacitive", or "unity" (out tied to inn: no z_in, z_fb)
    z_in: float = 10e3       # resistive: ohms; capacitive: farads
    z_fb: float = 10e3
    r_dc: float = 1e9        # capacitive only: resistor across the feedback capacitor
    c_in: float = 0.0        # capacitor from inn to ground (the job's input_load), farads
    r_sw: float = 0.0        # capacitive only: a switch's resistance in series with each capacitor

    def with_(self, **changes) -> Macromodel:
        return replace(self, **changes)

    def netlist(self, name: str = "macro") -> str:
        """The same circuit as an ngspice subckt (G, R, C only); cc and rc as parameters."""
        return f"""* linear two-stage macromodel (test data, invented values)
.subckt {name} inp inn out params: cc={self.cc!r} rc={self.rc!r}
G1 n1 0 inp inn {self.gm1!r}
R1 n1 0 {self.r1!r}
C1 n1 0 {self.c1!r}
G2 out 0 n1 0 {self.gm2!r}
R2 out 0 {self.r2!r}
C2 out 0 {self.c2!r}
Rc n1 nz {{rc}}
Cc nz out {{cc}}
.ends
"""


def _determinant(m: Macromodel, s: np.ndarray, gm1: float) -> np.ndarray:
    """det Y(s) of the closed loop for every complex frequency in ``s`` (vectorised)."""
    # nodes: 0 inn, 1 n1, 2 nz, 3 out; the input source and common mode are AC ground. In
    # the unity configuration inn is the output node itself (node 0 then unused, held at 0).
    s = np.asarray(s, dtype=complex)
    y = np.zeros(s.shape + (4, 4), dtype=complex)
    inn = 3 if m.kind == "unity" else 0

    def admittance(a, b, g):
        for i, j, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            if i is not None and j is not None:
                y[..., i, j] += sign * g

    if m.kind == "resistive":
        admittance(0, None, 1 / m.z_in)
        admittance(3, 0, 1 / m.z_fb)
    elif m.kind == "capacitive":  # each capacitor through its switch: sC/(1 + sRC)
        admittance(0, None, s * m.z_in / (1 + s * m.r_sw * m.z_in))
        admittance(3, 0, s * m.z_fb / (1 + s * m.r_sw * m.z_fb) + 1 / m.r_dc)
    else:
        y[..., 0, 0] = 1.0
    admittance(inn, None, s * m.c_in)
    admittance(1, None, 1 / m.r1 + s * m.c1)
    admittance(3, None, 1 / m.r2 + s * (m.c2 + m.cl))
    # the Rc-Cc branch; with Rc = 0 the capacitor joins n1 directly (node nz unused, held at 0).
    # ngspice itself turns a 0 Ω resistor into 1 mΩ, so tests that compare against ngspice
    # at Rc = 0 pass rc=1e-3 here.
    if m.rc > 0:
        # ngspice replaces a resistance below 1 mΩ by 1 mΩ (its @r[resistance] reads 1e-3)
        admittance(1, 2, 1 / max(m.rc, 1e-3))
        admittance(2, 3, s * m.cc)
    else:
        admittance(1, 3, s * m.cc)
        y[..., 2, 2] = 1.0
    # G1 n1 0 inp inn gm1: gm1·(v_inp − v_inn) leaves n1, with v_inp = 0
    y[..., 1, inn] += -gm1
    # G2 out 0 n1 0 gm2: gm2·v_n1 leaves out
    y[..., 3, 1] += m.gm2
    return np.linalg.det(y)


def exact_loop_gain(m: Macromodel, frequency_hz: np.ndarray) -> np.ndarray:
    """Loop gain T(j2πf) of the macromodel in its feedback loop (complex, dimensionless)."""
    s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)
    return _determinant(m, s, m.gm1) / _determinant(m, s, 0.0) - 1.0


def dense_margins(frequency_hz: np.ndarray, t: np.ndarray):
    """(PM deg, UGF Hz, GM dB) of each loop gain in ``t`` (last axis: ``frequency_hz``) by dense
    sampling and linear interpolation in log frequency; the smallest margin over the 0 dB
    crossings, NaN PM/UGF without one, inf GM without a phase crossover."""
    mag = np.log(np.abs(t))
    phase = np.degrees(np.unwrap(np.angle(t), axis=-1))
    x = np.log10(frequency_hz)
    pm = np.full(t.shape[:-1], np.nan)
    ugf = np.full(t.shape[:-1], np.nan)
    gm = np.full(t.shape[:-1], np.inf)
    for idx in np.ndindex(t.shape[:-1]):
        m, p = mag[idx], phase[idx]
        cross = np.nonzero(np.sign(m[:-1]) != np.sign(m[1:]))[0]
        margins = []
        for k in cross:
            a = m[k] / (m[k] - m[k + 1])
            margins.append((180 + p[k] + a * (p[k + 1] - p[k]), 10 ** (x[k] + a * (x[k + 1] - x[k]))))
        if margins:
            pm[idx], ugf[idx] = min(margins)
        pc = np.nonzero((p[:-1] > -180) & (p[1:] <= -180))[0]
        for k in pc:
            a = (p[k] + 180) / (p[k] - p[k + 1])
            gm[idx] = min(gm[idx], -20 / np.log(10) * (m[k] + a * (m[k + 1] - m[k])))
    return pm, ugf, gm
