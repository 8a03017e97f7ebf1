"""Exact loop gains of a linear fully-differential two-stage macromodel with a CMFB loop.

The reference the fully-differential measurement tests compare against. It uses nothing of
amploop: the modified nodal (MNA) matrix of the closed loop is written out here, at every
frequency, and the loop gains are Bode's return ratios,

    T = Δ / Δ⁰ − 1,

with Δ the determinant of the matrix and Δ⁰ the same with one controlled source set to zero
(H. W. Bode, "Network Analysis and Feedback Amplifier Design", 1945, ch. 4). The
differential half circuit and the split of a symmetric circuit into a differential and a
common-mode part are the textbook ones (Gray, Hurst, Lewis, Meyer, "Analysis and Design of
Analog Integrated Circuits", ch. 12; common practice). All element values are invented.

The amplifier (``FdMacromodel.netlist``), ``.subckt NAME inp inn outp outn vcm``::

    G1p n1p 0 inp inn gm1      G1n n1n 0 inn inp gm1     first stage, opposite signs
    R1p, C1p at n1p            R1n, C1n at n1n
    G2p outp 0 n1p 0 gm2_p     G2n outn 0 n1n 0 gm2_n    second stage (inverting)
    R2p, C2p at outp           R2n, C2n at outn
    Rc1 n1p nzp  Cc1 nzp outp  Rc2 n1n nzn  Cc2 nzn outn  Miller branches (Rc in series)
    Rs1 outp cms  Rs2 outn cms                           output common mode sensed
    Gcm ncm 0 cms vcm gcm;  Rcm, Ccm at ncm              CMFB error amplifier and its pole
    Vcmb ncm ncm_b 0                                     the CM break point (driving, driven)
    Cg ncm_b 0                                           load of the driven side
    Gfp n1p 0 ncm_b 0 gf    Gfn n1n 0 ncm_b 0 gf         CM correction into both n1 nodes

The differential path inverts twice (v(outp) − v(outn) follows +(v(inp) − v(inn))), the CM
path three times (Gcm, Gf, G2), so both loops are negative feedback.

The closed-loop testbench (``FdMacromodel.kind``): each output drives ``cl`` to ground; the
feedback network is symmetric: Z1 from an AC-grounded signal source to each input, Z2 from
outp to inn and from outn to inp (the differential feedback is negative that way round).
``resistive``: Z1 = ``z_in`` ohms, Z2 = ``z_fb`` ohms. ``capacitive``: Z1 = ``z_in`` farads,
Z2 = ``z_fb`` farads with ``r_dc`` ohms across it. The signal sources and ``vcm`` carry the
DC input and output common modes (e.g. 0.9 V) and are AC ground; for a linear model their
DC value changes nothing.

The loop gains:

- ``differential_loop_gain``: for a symmetric model, the return ratio of gm1 in the
  differential half circuit (midline at AC ground: ``cms``, ``ncm``, ``vcm`` carry no DM
  signal, so the CMFB is inert and each output sees Rs to ground); for an asymmetric model,
  the loop gain that anti-phase double injection at both outputs measures on the full
  circuit (``antiphase_injection_loop_gain``). Measured that way the DM channel of the break
  is opened while its CM channel stays closed, so it is the differential loop gain with the
  CM loop closed, the DM→CM→DM paths of the mismatch included; it equals the return ratio
  of gm1 in the full circuit (``full_return_ratio(..., "gm1")``), because every loop through
  the output break's DM channel passes through gm1 (the symmetric feedback network turns the
  output CM into input CM only, which the first stage rejects).
- ``common_mode_loop_gain``: the return ratio of gcm in the full circuit with the
  differential loop closed; every CM loop passes through gcm and through Vcmb, so it equals
  the loop gain at the Vcmb break point (single-ended double injection there,
  ``vcmb_injection_loop_gain``; R. D. Middlebrook, "Measurement of loop gain in feedback
  systems", Int. J. Electronics 38, 1975).

Anti-phase double injection at the outputs (the deck's formula): break each output between
the amplifier side ``outp``/``outn`` and the testbench side ``bp``/``bn`` (where CL and Z2
hang), with series sources ``Vp bp outp`` and ``Vn bn outn`` and shunt sources
``Ip 0 outp``, ``In 0 outn`` (each pushes its current into the output node). Run 1:
Vp = +0.5, Vn = −0.5 (a differential series voltage of 1, no CM), I sources 0. Run 2:
Ip = +0.5, In = −0.5 (a differential current of 0.5 in the power-conjugate pair
vd = vp − vn, id = (ip − in)/2), V sources 0. With ngspice's branch currents i(Vp), i(Vn)
(positive from + through the source to −, i.e. from the testbench side into the amplifier),
Middlebrook's 1/(1 + T) = v_b/v_inj + i_x/i_inj on the DM pair becomes

    T = 1 / ((v(bp) − v(bn))|run 1 − (i(Vp) − i(Vn))|run 2) − 1.

At the CM break: ``Vcmi ncm_b ncm`` (+ on the driven side) and ``Icmi 0 ncm``; run 1 Vcmi = 1,
run 2 Icmi = 1 A: T = 1 / (v(ncm_b)|run 1 − i(Vcmi)|run 2) − 1.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import brentq

#: Signal sources and the CM reference: AC ground.
_GROUND = ("0", "sp", "sn", "vcm")
#: ngspice turns a resistance below 1 mΩ into 1 mΩ (its @r[resistance] reads 1e-3); rc = 0
#: here is an exact short, so a comparison with ngspice at "0 Ω" passes rc=1e-3.
_SMALLEST_R = 1e-3


@dataclass(frozen=True)
class FdMacromodel:
    """Element values (SI) of the FD macromodel and its testbench; invented for the tests.

    ``gm2_mismatch`` and ``cc_mismatch`` are fractional: side p gets ``x·(1 + δ/2)``, side n
    ``x·(1 − δ/2)``; zero for a symmetric model.
    """

    gm1: float = 100e-6
    r1: float = 1e6
    c1: float = 50e-15
    gm2: float = 1e-3
    r2: float = 100e3
    c2: float = 100e-15
    cc: float = 1e-12
    rc: float = 600.0
    rs: float = 1e6          # CM sense resistors, one per output
    gcm: float = 20e-6       # CMFB error amplifier
    rcm: float = 200e3
    ccm: float = 20e-15      # with rcm: the CMFB pole, about 40 MHz
    cg: float = 20e-15       # load on the driven side of Vcmb
    gf: float = 5e-6         # CM correction into each first-stage node
    gm2_mismatch: float = 0.0
    cc_mismatch: float = 0.0
    cl: float = 10e-12
    kind: str = "resistive"  # or "capacitive"
    z_in: float = 10e3       # resistive: ohms; capacitive: farads
    z_fb: float = 20e3
    r_dc: float = 1e9        # capacitive only: resistor across each feedback capacitor

    def with_(self, **changes) -> FdMacromodel:
        """A copy with ``changes`` (field name -> value) applied."""
        return replace(self, **changes)

    @property
    def symmetric(self) -> bool:
        """True when both halves are equal (no mismatch)."""
        return self.gm2_mismatch == 0.0 and self.cc_mismatch == 0.0

    def side(self, name: str, side: str) -> float:
        """Value of ``name`` (``"gm2"`` or ``"cc"``) on ``side`` (``"p"`` or ``"n"``)."""
        delta = getattr(self, f"{name}_mismatch") / 2
        return getattr(self, name) * (1 + delta if side == "p" else 1 - delta)

    def netlist(self, name: str = "fdmacro", miller: str = "params") -> str:
        """The amplifier as an ngspice subckt (G, R, C and the 0 V source Vcmb only).

        ``miller="params"``: ``.subckt NAME inp inn outp outn vcm params: cc=.. rc=..``, the
        parameters setting both halves (Cc1 = cc·(1 + δ/2), Cc2 = cc·(1 − δ/2) under a
        mismatch δ). ``miller="elements"``: no parameters; Cc1, Cc2, Rc1, Rc2 carry plain
        values, for a job that sets the two capacitors as an element pair.
        """
        if miller == "params":
            head = f"params: cc={self.cc!r} rc={self.rc!r}"
            k1, k2 = 1 + self.cc_mismatch / 2, 1 - self.cc_mismatch / 2
            cc1 = "{cc}" if k1 == 1 else f"{{cc*{k1!r}}}"
            cc2 = "{cc}" if k2 == 1 else f"{{cc*{k2!r}}}"
            rc1 = rc2 = "{rc}"
        elif miller == "elements":
            head = ""
            cc1, cc2 = repr(self.side("cc", "p")), repr(self.side("cc", "n"))
            rc1 = rc2 = repr(self.rc)
        else:
            raise ValueError(f"miller must be 'params' or 'elements', not {miller!r}")
        return f"""* linear fully-differential two-stage macromodel with CMFB (test data, invented)
.subckt {name} inp inn outp outn vcm {head}
G1p n1p 0 inp inn {self.gm1!r}
G1n n1n 0 inn inp {self.gm1!r}
R1p n1p 0 {self.r1!r}
C1p n1p 0 {self.c1!r}
R1n n1n 0 {self.r1!r}
C1n n1n 0 {self.c1!r}
G2p outp 0 n1p 0 {self.side("gm2", "p")!r}
G2n outn 0 n1n 0 {self.side("gm2", "n")!r}
R2p outp 0 {self.r2!r}
C2p outp 0 {self.c2!r}
R2n outn 0 {self.r2!r}
C2n outn 0 {self.c2!r}
Rc1 n1p nzp {rc1}
Cc1 nzp outp {cc1}
Rc2 n1n nzn {rc2}
Cc2 nzn outn {cc2}
Rs1 outp cms {self.rs!r}
Rs2 outn cms {self.rs!r}
Gcm ncm 0 cms vcm {self.gcm!r}
Rcm ncm 0 {self.rcm!r}
Ccm ncm 0 {self.ccm!r}
Vcmb ncm ncm_b 0
Cg ncm_b 0 {self.cg!r}
Gfp n1p 0 ncm_b 0 {self.gf!r}
Gfn n1n 0 ncm_b 0 {self.gf!r}
.ends {name}
"""


#: The default model (invented), where the DM loop has the lower phase margin, and one where
#: the CM loop limits it: the CMFB pole at 3.2 MHz instead of 40 MHz (ccm 250 fF).
DEFAULT = FdMacromodel()
CM_LIMITED = FdMacromodel(ccm=250e-15)


class _Mna:
    """Modified nodal matrices for every complex frequency in ``s``, built element by element.

    Unknowns: the node voltages, then one branch current per voltage source (positive from
    its + node through the source to its − node, as in SPICE). Rows are KCL with the
    currents leaving a node; the right-hand side holds the currents pushed into nodes and
    the source voltages.
    """

    def __init__(self, s: np.ndarray, nodes: list[str], vsources: list[tuple[str, str, str]]):
        self.s = np.asarray(s, dtype=complex)
        self.index = {n: i for i, n in enumerate(nodes)}
        self.vsources = {name: len(nodes) + k for k, (name, _, _) in enumerate(vsources)}
        size = len(nodes) + len(vsources)
        self.y = np.zeros(self.s.shape + (size, size), dtype=complex)
        for name, plus, minus in vsources:
            k = self.vsources[name]
            for node, sign in ((plus, 1), (minus, -1)):
                if (i := self._i(node)) is not None:
                    self.y[..., i, k] += sign
                    self.y[..., k, i] += sign

    def _i(self, node: str) -> int | None:
        return None if node in _GROUND else self.index[node]

    def admittance(self, a: str, b: str, value) -> None:
        """A two-terminal admittance ``value`` (S, scalar or per frequency) from a to b."""
        i, j = self._i(a), self._i(b)
        for p, q, sign in ((i, i, 1), (j, j, 1), (i, j, -1), (j, i, -1)):
            if p is not None and q is not None:
                self.y[..., p, q] += sign * value

    def vccs(self, out_p: str, out_n: str, ctl_p: str, ctl_n: str, gm: float) -> None:
        """``G out_p out_n ctl_p ctl_n gm``: gm·(v(ctl_p) − v(ctl_n)) leaves out_p."""
        for out, so in ((out_p, 1), (out_n, -1)):
            for ctl, sc in ((ctl_p, 1), (ctl_n, -1)):
                i, j = self._i(out), self._i(ctl)
                if i is not None and j is not None:
                    self.y[..., i, j] += so * sc * gm

    def solve(self, currents: dict[str, float], voltages: dict[str, float]) -> dict[str, np.ndarray]:
        """Node voltages and source currents (``i(name)``) for the given excitations."""
        rhs = np.zeros(self.y.shape[:-1], dtype=complex)
        for node, value in currents.items():
            rhs[..., self.index[node]] += value
        for name, value in voltages.items():
            rhs[..., self.vsources[name]] += value
        x = np.linalg.solve(self.y, rhs[..., None])[..., 0]
        out = {n: x[..., i] for n, i in self.index.items()}
        out.update({f"i({n})": x[..., k] for n, k in self.vsources.items()})
        return out


def _feedback(m: FdMacromodel, c: _Mna, out: str, into: str, source: str) -> None:
    """Z2 from the testbench side of one output to the opposite input, Z1 from its source."""
    if m.kind == "resistive":
        c.admittance(into, source, 1 / m.z_in)
        c.admittance(out, into, 1 / m.z_fb)
    elif m.kind == "capacitive":
        c.admittance(into, source, c.s * m.z_in)
        c.admittance(out, into, c.s * m.z_fb + 1 / m.r_dc)
    else:
        raise ValueError(f"kind must be 'resistive' or 'capacitive', not {m.kind!r}")


def _half(m: FdMacromodel, c: _Mna, side: str, gm1: float, gf: float, names: dict) -> None:
    """One half of the amplifier: first-stage node, Miller branch, output node."""
    n1, nz, out, inp, inn = (names[k] for k in ("n1", "nz", "out", "inp", "inn"))
    c.vccs(n1, "0", inp, inn, gm1)
    c.admittance(n1, "0", 1 / m.r1 + c.s * m.c1)
    c.vccs(out, "0", n1, "0", m.side("gm2", side))
    c.admittance(out, "0", 1 / m.r2 + c.s * m.c2)
    if m.rc > 0:
        c.admittance(n1, nz, 1 / max(m.rc, _SMALLEST_R))
        c.admittance(nz, out, c.s * m.side("cc", side))
    else:  # the capacitor joins n1 directly; nz is left alone at 0 V (a unit diagonal)
        c.admittance(n1, out, c.s * m.side("cc", side))
        c.admittance(nz, "0", 1.0)
    if gf:
        c.vccs(n1, "0", "ncm_b", "0", gf)


def _full(m: FdMacromodel, s: np.ndarray, *, gm1: float, gcm: float,
          cm_source: tuple[str, str, str] = ("vcmb", "ncm", "ncm_b")) -> _Mna:
    """The whole closed loop with Vp, Vn (0 V until excited) at the outputs and the CM break
    source ``cm_source`` = (name, + node, − node) in place of Vcmb."""
    nodes = ["inp", "inn", "n1p", "n1n", "nzp", "nzn", "outp", "outn", "bp", "bn", "cms",
             "ncm", "ncm_b"]
    c = _Mna(s, nodes, [("vp", "bp", "outp"), ("vn", "bn", "outn"), cm_source])
    _half(m, c, "p", gm1, m.gf, dict(n1="n1p", nz="nzp", out="outp", inp="inp", inn="inn"))
    _half(m, c, "n", gm1, m.gf, dict(n1="n1n", nz="nzn", out="outn", inp="inn", inn="inp"))
    c.admittance("outp", "cms", 1 / m.rs)
    c.admittance("outn", "cms", 1 / m.rs)
    c.vccs("ncm", "0", "cms", "vcm", gcm)
    c.admittance("ncm", "0", 1 / m.rcm + c.s * m.ccm)
    c.admittance("ncm_b", "0", c.s * m.cg)
    for out in ("bp", "bn"):
        c.admittance(out, "0", c.s * m.cl)
    _feedback(m, c, "bp", "inn", "sn")
    _feedback(m, c, "bn", "inp", "sp")
    return c


def _s(frequency_hz) -> np.ndarray:
    return 2j * np.pi * np.asarray(frequency_hz, dtype=float)


def full_return_ratio(model: FdMacromodel, frequency_hz, source: str) -> np.ndarray:
    """Bode's return ratio Δ/Δ⁰ − 1 of ``source`` (``"gm1"``: G1p and G1n together, or
    ``"gcm"``) in the full closed-loop circuit, at each frequency (Hz); complex."""
    if source not in ("gm1", "gcm"):
        raise ValueError(f"source must be 'gm1' or 'gcm', not {source!r}")
    s = _s(frequency_hz)
    on = dict(gm1=model.gm1, gcm=model.gcm)
    off = dict(on, **{source: 0.0})
    return np.linalg.det(_full(model, s, **on).y) / np.linalg.det(_full(model, s, **off).y) - 1


def half_circuit_loop_gain(model: FdMacromodel, frequency_hz) -> np.ndarray:
    """Return ratio of gm1 in the differential half circuit of a symmetric model (complex).

    Side p with ``inp = −inn`` and ``cms`` at AC ground: G1p's current gm1·(v(inp) − v(inn))
    is −2·gm1·v(inn); Rs goes to ground; the CMFB carries no signal.
    """
    if not model.symmetric:
        raise ValueError("the half circuit exists for a symmetric model only")

    def det(gm1: float) -> np.ndarray:
        c = _Mna(_s(frequency_hz), ["inn", "n1", "nz", "out", "b"], [("vp", "b", "out")])
        _half(model, c, "p", 0.0, 0.0, dict(n1="n1", nz="nz", out="out", inp="0", inn="0"))
        c.vccs("n1", "0", "0", "inn", 2 * gm1)
        c.admittance("out", "0", 1 / model.rs)
        c.admittance("b", "0", c.s * model.cl)
        _feedback(model, c, "b", "inn", "sn")
        return np.linalg.det(c.y)

    return det(model.gm1) / det(0.0) - 1


def antiphase_injection_loop_gain(model: FdMacromodel, frequency_hz) -> np.ndarray:
    """The loop gain anti-phase double injection at both outputs measures, solved on the
    full circuit: T = 1/((v(bp) − v(bn))|run 1 − (i(Vp) − i(Vn))|run 2) − 1 (module notes)."""
    c = _full(model, _s(frequency_hz), gm1=model.gm1, gcm=model.gcm)
    run1 = c.solve({}, {"vp": 0.5, "vn": -0.5})
    run2 = c.solve({"outp": 0.5, "outn": -0.5}, {})
    return 1 / ((run1["bp"] - run1["bn"]) - (run2["i(vp)"] - run2["i(vn)"])) - 1


def vcmb_injection_loop_gain(model: FdMacromodel, frequency_hz) -> np.ndarray:
    """The loop gain single-ended double injection at Vcmb measures, solved on the full
    circuit: T = 1/(v(ncm_b)|run 1 − i(Vcmi)|run 2) − 1 with ``Vcmi ncm_b ncm``."""
    c = _full(model, _s(frequency_hz), gm1=model.gm1, gcm=model.gcm,
              cm_source=("vcmi", "ncm_b", "ncm"))
    run1 = c.solve({}, {"vcmi": 1.0})
    run2 = c.solve({"ncm": 1.0}, {})
    return 1 / (run1["ncm_b"] - run2["i(vcmi)"]) - 1


def differential_loop_gain(model: FdMacromodel, frequency_hz) -> np.ndarray:
    """The differential loop gain T_dm(j2πf), complex, dimensionless.

    Symmetric model: the half-circuit return ratio of gm1. Asymmetric model: what
    anti-phase double injection at the outputs measures, the DM loop gain with the CM loop
    closed (module notes); it equals ``full_return_ratio(model, f, "gm1")``.
    """
    if model.symmetric:
        return half_circuit_loop_gain(model, frequency_hz)
    return antiphase_injection_loop_gain(model, frequency_hz)


def common_mode_loop_gain(model: FdMacromodel, frequency_hz) -> np.ndarray:
    """The CMFB loop gain T_cm(j2πf): the return ratio of gcm with the DM loop closed."""
    return full_return_ratio(model, frequency_hz, "gcm")


def margins(loop_gain, model: FdMacromodel, f_lo_hz: float = 1.0,
            f_hi_hz: float = 1e10) -> tuple[float, float, float]:
    """(DC loop gain dB at ``f_lo_hz``, unity-gain frequency Hz, phase margin deg) of
    ``loop_gain(model, f_hz)``, solved with scipy's brentq on the first downward crossing of
    |T| = 1 between ``f_lo_hz`` and ``f_hi_hz``; the phase is unwrapped from ``f_lo_hz``
    (where T of a negative-feedback loop is near the positive real axis) to the crossing.
    (nan, nan, nan) parts when there is no crossing."""
    grid = np.logspace(np.log10(f_lo_hz), np.log10(f_hi_hz), 2001)
    t = loop_gain(model, grid)
    dc_db = 20 * np.log10(abs(t[0]))
    below = np.nonzero(np.abs(t) < 1)[0]
    if len(below) == 0 or below[0] == 0:
        return dc_db, float("nan"), float("nan")
    k = below[0]

    def mag_minus_one(log_f: float) -> float:
        return abs(loop_gain(model, np.array([10.0**log_f]))[0]) - 1.0

    ugf = 10.0 ** brentq(mag_minus_one, np.log10(grid[k - 1]), np.log10(grid[k]), xtol=1e-14)
    phase = np.unwrap(np.angle(np.append(t[:k], loop_gain(model, np.array([ugf]))[0])))
    return dc_db, ugf, 180.0 + float(np.degrees(phase[-1]))
