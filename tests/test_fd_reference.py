"""The fully-differential references (tests/nodal_fd.py) against ngspice, and against each other.

Reference: ngspice 39 itself, in batch mode (``ngspice -b``), on decks written here (not
through amploop) around ``FdMacromodel.netlist``. The differential loop is broken at both
outputs by anti-phase double injection, the CM loop at Vcmb by single-ended double
injection (R. D. Middlebrook, "Measurement of loop gain in feedback systems", Int. J.
Electronics 38, 1975); the formulas and their signs are in tests/nodal_fd.py's notes. The
nodal side is Bode's return ratio T = Δ/Δ⁰ − 1 (H. W. Bode, 1945, ch. 4) and the
differential half circuit (Gray, Hurst, Lewis, Meyer, ch. 12; common practice). Tolerances
are the project's: phase margin 0.05°, unity-gain frequency 0.1 %, and the loop gain 1e-6
relative over 1 Hz–1 GHz. All model values are invented.
"""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from nodal_fd import (
    CM_LIMITED,
    DEFAULT,
    FdMacromodel,
    antiphase_injection_loop_gain,
    common_mode_loop_gain,
    differential_loop_gain,
    full_return_ratio,
    half_circuit_loop_gain,
    margins,
    vcmb_injection_loop_gain,
)

RESISTIVE = DEFAULT
CAPACITIVE = DEFAULT.with_(kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9)
#: Three (cc, rc) points: light, typical and heavy compensation.
POINTS = [(0.5e-12, 1.5e3), (1e-12, 600.0), (3e-12, 0.0)]
ASYMMETRIC = DEFAULT.with_(gm2_mismatch=0.3, cc_mismatch=0.2)
#: The four runs of one deck: (Vp, Vn, Ip, In, Vcmi, Icmi) AC magnitudes; Vn and In carry
#: phase 180°, so Vn = −0.5 and In pushes −0.5 A into outn when on.
RUNS = {"dm_v": (0.5, 0.5, 0, 0, 0, 0), "dm_i": (0, 0, 0.5, 0.5, 0, 0),
        "cm_v": (0, 0, 0, 0, 1, 0), "cm_i": (0, 0, 0, 0, 0, 1)}
SOURCES = ("vp", "vn", "ip", "in", "v.x1.vcmi", "i.x1.icmi")
VECTORS = "v(bp) v(bn) i(vp) i(vn) v(x1.ncm_b) i(v.x1.vcmi)"


def _feedback(m: FdMacromodel) -> str:
    if m.kind == "resistive":
        return (f"Z1p inp sp {m.z_in!r}\nZ1n inn sn {m.z_in!r}\n"
                f"Z2p bp inn {m.z_fb!r}\nZ2n bn inp {m.z_fb!r}\n").replace("Z", "R")
    return (f"C1p inp sp {m.z_in!r}\nC1n inn sn {m.z_in!r}\nC2p bp inn {m.z_fb!r}\n"
            f"C2n bn inp {m.z_fb!r}\nRdp bp inn {m.r_dc!r}\nRdn bn inp {m.r_dc!r}\n")


def deck(m: FdMacromodel, miller: str = "params") -> str:
    """The closed loop around ``m`` with both probes in, and four AC runs written to files."""
    net = m.netlist(miller=miller)
    assert net.count("Vcmb ncm ncm_b 0\n") == 1
    net = net.replace("Vcmb ncm ncm_b 0\n", "Vcmi ncm_b ncm dc 0 ac 0\nIcmi 0 ncm dc 0 ac 0\n")
    control = ["set wr_singlescale", "set numdgt=15"]
    for name, amplitudes in RUNS.items():
        control += [f"alter {s} acmag={a!r}" for s, a in zip(SOURCES, amplitudes)]
        control += ["ac dec 100 1 10g", f"wrdata {name}.txt {VECTORS}", "destroy all"]
    return "\n".join([
        "* fully-differential macromodel, loop gains by double injection (test deck)", net,
        "X1 inp inn outp outn vcm fdmacro", "Vsp sp 0 dc 0.9", "Vsn sn 0 dc 0.9",
        "Vcm vcm 0 dc 0.9", "Vp bp outp dc 0 ac 0", "Vn bn outn dc 0 ac 0 180",
        "Ip 0 outp dc 0 ac 0", "In 0 outn dc 0 ac 0 180", f"CLp bp 0 {m.cl!r}",
        f"CLn bn 0 {m.cl!r}", _feedback(m), ".control", *control, "quit", ".endc", ".end", ""])


def simulate(m: FdMacromodel, folder: Path, miller: str = "params"):
    """(frequency Hz, T_dm, T_cm) from ngspice, by the double-injection formulas."""
    assert shutil.which("ngspice"), "ngspice must be installed for these tests"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / ".spiceinit").write_text("set num_threads=1\n")
    (folder / "fd.cir").write_text(deck(m, miller))
    done = subprocess.run(["ngspice", "-b", "fd.cir"], cwd=folder, capture_output=True,
                          text=True, timeout=60, check=False)
    assert done.returncode == 0 and "error" not in (done.stdout + done.stderr).lower(), \
        done.stdout[-1500:] + done.stderr[-1500:]
    runs = {}
    for name in RUNS:
        data = np.loadtxt(folder / f"{name}.txt")
        cols = data[:, 1::2] + 1j * data[:, 2::2]
        runs[name] = dict(zip(("bp", "bn", "ip", "in", "ncm_b", "icm"), cols.T))
        f = data[:, 0]
    dm_v, dm_i, cm_v, cm_i = (runs[k] for k in RUNS)
    # DM: 1/(1+T) = (v(bp) − v(bn))|run 1 − (i(Vp) − i(Vn))|run 2 (nodal_fd notes)
    t_dm = 1 / ((dm_v["bp"] - dm_v["bn"]) - (dm_i["ip"] - dm_i["in"])) - 1
    # CM at Vcmi ncm_b ncm: 1/(1+T) = v(ncm_b)|run 1 + (−i(Vcmi))|run 2
    t_cm = 1 / (cm_v["ncm_b"] - cm_i["icm"]) - 1
    return f, t_dm, t_cm


def sampled_margins(f: np.ndarray, t: np.ndarray) -> tuple[float, float]:
    """(unity-gain frequency Hz, phase margin deg) of sampled data: a cubic through the four
    samples around the first crossing of |T| = 1, in log f, for log|T| and unwrapped phase."""
    k = int(np.nonzero(np.abs(t) < 1)[0][0])
    window = slice(k - 2, k + 2)
    x = np.log10(f[window])
    magnitude = np.polynomial.Polynomial.fit(x, np.log10(np.abs(t[window])), 3)
    roots = [r.real for r in magnitude.roots() if abs(r.imag) < 1e-12 and x[1] <= r.real <= x[2]]
    phase = np.polynomial.Polynomial.fit(x, np.degrees(np.unwrap(np.angle(t[:k + 2]))[window]), 3)
    return 10.0 ** roots[0], 180.0 + phase(roots[0])


def check_against_reference(f, measured, reference, model, label):
    band = f <= 1e9
    exact = reference(model, f[band])
    worst = np.max(np.abs(measured[band] - exact) / np.abs(exact))
    assert worst < 1e-6, f"{label}: worst relative error {worst:.2e}"
    _, ugf, pm = margins(reference, model)
    measured_ugf, measured_pm = sampled_margins(f, measured)
    assert measured_pm == pytest.approx(pm, abs=0.05), label
    assert measured_ugf == pytest.approx(ugf, rel=1e-3), label
    return ugf, pm


@pytest.mark.parametrize("bench", [RESISTIVE, CAPACITIVE], ids=["resistive", "capacitive"])
@pytest.mark.parametrize("cc, rc", POINTS, ids=["light", "typical", "heavy"])
def test_both_loop_gains_match_ngspice_double_injection(bench, cc, rc, tmp_path):
    model = bench.with_(cc=cc, rc=max(rc, 1e-3))  # ngspice reads 0 Ω as 1 mΩ
    f, t_dm, t_cm = simulate(model, tmp_path)
    dm = check_against_reference(f, t_dm, differential_loop_gain, model, "DM")
    cm = check_against_reference(f, t_cm, common_mode_loop_gain, model, "CM")
    assert abs(dm[0] / cm[0] - 1) > 0.5 and abs(dm[1] - cm[1]) > 5  # two distinct loops


def test_the_two_references_of_each_loop_agree_on_symmetric_models():
    """Half circuit = anti-phase injection solved on the full circuit = full return ratio of
    gm1; and the gcm return ratio = the Vcmb double injection, all by nodal analysis.

    The CM pair is compared relative to max(|T|, 1): past 500 MHz its |T| is about 1e-6,
    and T = Δ/Δ⁰ − 1 keeps only the digits of Δ/Δ⁰ there."""
    f = np.logspace(0, 9, 91)
    for bench in (RESISTIVE, CAPACITIVE, CM_LIMITED):
        for cc, rc in POINTS:
            m = bench.with_(cc=cc, rc=rc)
            half = half_circuit_loop_gain(m, f)
            for other in (antiphase_injection_loop_gain(m, f), full_return_ratio(m, f, "gm1")):
                assert np.max(np.abs(other / half - 1)) < 1e-9
            cm = common_mode_loop_gain(m, f)
            scale = np.maximum(np.abs(cm), 1.0)
            assert np.max(np.abs(vcmb_injection_loop_gain(m, f) - cm) / scale) < 1e-9


def test_the_cm_loop_limits_the_phase_margin_when_its_pole_is_low(tmp_path):
    """Default: the DM loop has the lower margin; CMFB pole at 3.2 MHz: the CM loop has."""
    for model, cm_lower in ((DEFAULT, False), (CM_LIMITED, True)):
        f, t_dm, t_cm = simulate(model, tmp_path / str(cm_lower))
        _, pm_dm = check_against_reference(f, t_dm, differential_loop_gain, model, "DM")
        _, pm_cm = check_against_reference(f, t_cm, common_mode_loop_gain, model, "CM")
        assert (pm_cm < pm_dm - 10) if cm_lower else (pm_dm < pm_cm - 5)


def test_asymmetric_model_antiphase_injection_is_the_gm1_return_ratio(tmp_path):
    """30 % gm2 and 20 % Cc mismatch: what anti-phase injection measures in ngspice is the
    full-circuit return ratio of gm1, the DM loop gain with the CM loop closed. The CM loop
    matters: with gcm = 0 the DM loop gain moves (on a symmetric model it does not)."""
    f, t_dm, t_cm = simulate(ASYMMETRIC, tmp_path)
    gm1 = lambda m, f_hz: full_return_ratio(m, f_hz, "gm1")
    check_against_reference(f, t_dm, gm1, ASYMMETRIC, "DM")
    check_against_reference(f, t_dm, differential_loop_gain, ASYMMETRIC, "DM")
    check_against_reference(f, t_cm, common_mode_loop_gain, ASYMMETRIC, "CM")
    with pytest.raises(ValueError):
        half_circuit_loop_gain(ASYMMETRIC, f)
    band = f[(f > 1e4) & (f < 1e8)]
    open_cm = np.abs(gm1(ASYMMETRIC.with_(gcm=0.0), band) / gm1(ASYMMETRIC, band) - 1)
    assert open_cm.max() > 1e-3
    same = np.abs(gm1(DEFAULT.with_(gcm=0.0), band) / gm1(DEFAULT, band) - 1)
    assert same.max() < 1e-9


def test_the_element_pair_netlist_is_the_same_circuit(tmp_path):
    """Cc1, Cc2, Rc1, Rc2 with plain values: the same loop gains as the parameter variant."""
    model = ASYMMETRIC.with_(cc=1.3e-12, rc=900.0)
    assert "params:" not in model.netlist(miller="elements")
    _, dm_a, cm_a = simulate(model, tmp_path / "params")
    _, dm_b, cm_b = simulate(model, tmp_path / "elements", miller="elements")
    np.testing.assert_allclose(dm_b, dm_a, rtol=1e-9)
    np.testing.assert_allclose(cm_b, cm_a, rtol=1e-9)


def _fit_and_predict(z: np.ndarray, t: np.ndarray, z_new: complex) -> complex:
    """T(Z) = (a + bZ)/(c + dZ) through three (Z, T) samples, evaluated at ``z_new``: the
    null vector of a + bZ − cT − dTZ = 0."""
    rows = np.stack([np.ones(3), z, -t, -t * z], axis=1)
    a, b, c, d = np.linalg.svd(rows)[2][-1].conj()
    return (a + b * z_new) / (c + d * z_new)


@pytest.mark.parametrize("loop", [differential_loop_gain, common_mode_loop_gain],
                         ids=["dm", "cm"])
def test_loop_gains_are_bilinear_in_the_miller_impedance(loop):
    """Both halves set together: T is a Möbius map of Z = rc + 1/(s·cc) at each frequency
    (Δ is linear in the branch admittance in each of the DM and CM parts). With a Cc
    mismatch the two halves' Z differ and the map breaks (the check can fail)."""
    f = np.logspace(1, 9, 33)
    s = 2j * np.pi * f
    samples = [(0.6e-12, 300.0), (1.1e-12, 1.2e3), (2e-12, 50.0)]
    query = (1.5e-12, 2.5e3)
    for base, bilinear in ((RESISTIVE, True), (CAPACITIVE, True),
                           (DEFAULT.with_(cc_mismatch=0.4), False)):
        z = np.array([rc + 1 / (s * cc) for cc, rc in samples])
        t = np.array([loop(base.with_(cc=cc, rc=rc), f) for cc, rc in samples])
        z_q = query[1] + 1 / (s * query[0])
        t_q = loop(base.with_(cc=query[0], rc=query[1]), f)
        predicted = np.array([_fit_and_predict(z[:, i], t[:, i], z_q[i]) for i in range(len(f))])
        worst = np.max(np.abs(predicted / t_q - 1))
        assert (worst < 1e-6) if bilinear else (worst > 1e-4), worst
