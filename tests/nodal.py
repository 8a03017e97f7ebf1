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


#: The closed loop's nodes: inn, n1, nz, out, and the two switch nodes of a capacitive
#: loop with switches (between the switch and Cin, between Cfb and its switch).
NODES = 6


def nodal_matrices(m: Macromodel, gm1: float | None = None):
    """(G, C) with the closed loop's nodal admittance matrix Y(s) = G + s·C (6×6, SI).

    Nodes: 0 inn, 1 n1, 2 nz, 3 out, 4 and 5 the switch nodes (held at 0 when unused); the
    input source and the common mode are AC ground. In the unity configuration inn is the
    output node itself (node 0 then unused). ``gm1`` replaces the model's first-stage
    transconductance (0 for Bode's Δ⁰).
    """
    gm1 = m.gm1 if gm1 is None else gm1
    g = np.zeros((NODES, NODES))
    c = np.zeros((NODES, NODES))
    inn = 3 if m.kind == "unity" else 0

    def admittance(y, a, b, value):
        for i, j, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
            if i is not None and j is not None:
                y[i, j] += sign * value

    switched = m.kind == "capacitive" and m.r_sw > 0
    if m.kind == "resistive":
        admittance(g, 0, None, 1 / m.z_in)
        admittance(g, 3, 0, 1 / m.z_fb)
    elif switched:  # signal (AC ground) -Rsw- 4 -Cin- inn;  out -Cfb- 5 -Rsw- inn
        admittance(g, 4, None, 1 / m.r_sw)
        admittance(c, 4, 0, m.z_in)
        admittance(c, 3, 5, m.z_fb)
        admittance(g, 5, 0, 1 / m.r_sw)
        admittance(g, 3, 0, 1 / m.r_dc)
    elif m.kind == "capacitive":
        admittance(c, 0, None, m.z_in)
        admittance(c, 3, 0, m.z_fb)
        admittance(g, 3, 0, 1 / m.r_dc)
    else:
        g[0, 0] = 1.0
    if not switched:
        g[4, 4] = g[5, 5] = 1.0
    admittance(c, inn, None, m.c_in)
    admittance(g, 1, None, 1 / m.r1)
    admittance(c, 1, None, m.c1)
    admittance(g, 3, None, 1 / m.r2)
    admittance(c, 3, None, m.c2 + m.cl)
    # the Rc-Cc branch; with Rc = 0 the capacitor joins n1 directly (node nz unused, held at 0).
    # ngspice itself turns a 0 Ω resistor into 1 mΩ, so tests that compare against ngspice
    # at Rc = 0 pass rc=1e-3 here.
    if m.rc > 0:
        # ngspice replaces a resistance below 1 mΩ by 1 mΩ (its @r[resistance] reads 1e-3)
        admittance(g, 1, 2, 1 / max(m.rc, 1e-3))
        admittance(c, 2, 3, m.cc)
    else:
        admittance(c, 1, 3, m.cc)
        g[2, 2] = 1.0
    # G1 n1 0 inp inn gm1: gm1·(v_inp − v_inn) leaves n1, with v_inp = 0
    g[1, inn] += -gm1
    # G2 out 0 n1 0 gm2: gm2·v_n1 leaves out
    g[3, 1] += m.gm2
    return g, c


def signal_injection(m: Macromodel) -> tuple[np.ndarray, np.ndarray]:
    """(b_g, b_c): the current into the nodes per volt of the signal source, b_g + s·b_c
    (its Norton equivalent through Z1 into inn, or through the switch into node 4; Z1 to
    ground is already in G, C). Resistive and capacitive loops only."""
    if m.kind == "unity":
        raise ValueError("a unity configuration takes its signal at the non-inverting input")
    b_g, b_c = np.zeros(NODES), np.zeros(NODES)
    if m.kind == "resistive":
        b_g[0] = 1 / m.z_in
    elif m.r_sw > 0:
        b_g[4] = 1 / m.r_sw
    else:
        b_c[0] = m.z_in
    return b_g, b_c


def _determinant(m: Macromodel, s: np.ndarray, gm1: float) -> np.ndarray:
    """det Y(s) of the closed loop for every complex frequency in ``s`` (vectorised)."""
    g, c = nodal_matrices(m, gm1)
    s = np.asarray(s, dtype=complex)[..., None, None]
    return np.linalg.det(g + s * c)


def exact_closed_loop(m: Macromodel, frequency_hz: np.ndarray) -> np.ndarray:
    """Closed-loop response v(out)/v(sig) at j2πf (complex, V/V): Y(s)·v = b(s) solved."""
    s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)
    g, c = nodal_matrices(m)
    b_g, b_c = signal_injection(m)
    y = g + s[:, None, None] * c
    b = b_g + s[:, None] * b_c
    return np.linalg.solve(y, b[..., None])[:, 3, 0]


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


def _poly_det(entries: list[list[np.ndarray]]) -> np.ndarray:
    """Determinant of a square matrix of polynomials (coefficients lowest power first), by
    Laplace expansion along the first row."""
    P = np.polynomial.polynomial
    if len(entries) == 1:
        return entries[0][0]
    total = np.zeros(1)
    for j, entry in enumerate(entries[0]):
        minor = [row[:j] + row[j + 1:] for row in entries[1:]]
        total = P.polyadd(total, (-1) ** j * P.polymul(entry, _poly_det(minor)))
    return total


#: The frequency scale of the polynomials, rad/s (keeps their coefficients comparable).
OMEGA0 = 1e9


def exact_closed_loop_rational(m: Macromodel) -> tuple[np.ndarray, np.ndarray]:
    """(N, D): v(out)/v(sig) = N(ŝ)/D(ŝ) with ŝ = s/OMEGA0, polynomial coefficients lowest
    power first, by Cramer's rule on Y(s) = G + s·C: D = det Y, N = det Y with the output's
    column replaced by the injection b(s)."""
    g, c = nodal_matrices(m)
    b_g, b_c = signal_injection(m)
    entries = [[np.array([g[i, j], OMEGA0 * c[i, j]]) for j in range(NODES)]
               for i in range(NODES)]
    d = _poly_det(entries)
    for i in range(NODES):
        entries[i][3] = np.array([b_g[i], OMEGA0 * b_c[i]])
    n = _poly_det(entries)
    trim = np.polynomial.polynomial.polytrim
    return trim(n, 0), trim(d, 0)


def exact_step_terms(m: Macromodel) -> tuple[float, np.ndarray, np.ndarray]:
    """(H(0), c_k, p_k): the unit step response y(t) = H(0) + Re Σ c_k·exp(p_k·t) of the
    closed loop (p_k in rad/s), from the partial fractions of N/(ŝ·D): the residue at a
    simple pole p of D is N(p)/(p·D'(p)), and at 0 it is N(0)/D(0) = H(0)."""
    P = np.polynomial.polynomial
    n, d = exact_closed_loop_rational(m)
    poles = P.polyroots(d)
    c = P.polyval(poles, n) / (poles * P.polyval(poles, P.polyder(d)))
    return float(n[0] / d[0]), c, poles * OMEGA0


def exact_step(m: Macromodel, time_s: np.ndarray) -> np.ndarray:
    """The closed loop's unit step response at ``time_s`` (seconds ≥ 0), V/V
    (:func:`exact_step_terms`)."""
    h0, c, p = exact_step_terms(m)
    t = np.asarray(time_s, dtype=float)[..., None]
    return h0 + np.real(np.sum(c * np.exp(p * t), axis=-1))


def zoomed_grid_optimum(score, cc_bounds: tuple[float, float], rc_high: float, *,
                        rc_low: float = 50.0, points: int = 14, zoom: int = 7,
                        levels: int = 3) -> tuple[float, float, float]:
    """(best score, Cc, Rc) of ``score(cc, rc)`` (−inf where infeasible) over a grid of
    ``points`` log-spaced Cc within ``cc_bounds`` and Rc = 0 plus ``points`` − 1 log-spaced
    from ``rc_low`` to ``rc_high`` ohms, zoomed ``levels`` − 1 times to ``zoom`` × ``zoom``
    around the best point: the tests' exhaustive search on an exact model."""
    cc = np.geomspace(*cc_bounds, points)
    rc = np.concatenate([[0.0], np.geomspace(rc_low, rc_high, points - 1)])
    best = None
    for _ in range(levels):
        grid = np.array([[score(c, r) for r in rc] for c in cc])
        i, j = np.unravel_index(np.argmax(grid), grid.shape)
        best = (float(grid[i, j]), float(cc[i]), float(rc[j]))
        cc = np.geomspace(cc[max(i - 1, 0)], cc[min(i + 1, cc.size - 1)], zoom)
        rc = np.linspace(rc[max(j - 1, 0)], rc[min(j + 1, rc.size - 1)], zoom)
    return best
