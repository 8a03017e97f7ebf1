"""The measured loop gain against an exact nodal solution, with real ngspice.

Reference: the linear two-stage macromodel's loop gain computed in numpy by nodal
analysis (tests/nodal.py: Bode's return ratio T = Δ/Δ⁰ − 1 of the textbook two-stage
small-signal model, Gray, Hurst, Lewis, Meyer, "Analysis and Design of Analog Integrated
Circuits", ch. 9). Tolerances are the ones the project promises: loop gain 1e-6 relative
over 1 Hz–1 GHz, phase margin 0.05°, unity-gain frequency 0.1 %, DC loop gain 0.01 dB.
"""

from __future__ import annotations

import subprocess

import numpy as np
import pytest
from nodal import Macromodel, exact_loop_gain
from scipy.optimize import brentq

from amploop.corners.measure import measure
from amploop.spec.job import load_job

RESISTIVE = Macromodel(kind="resistive", z_in=10e3, z_fb=20e3, cc=1.5e-12, rc=800.0, cl=2e-12)
CAPACITIVE = Macromodel(kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9, cc=1e-12,
                        rc=1.5e3, cl=3e-12)


def exact_margins(model: Macromodel) -> tuple[float, float, float]:
    """(DC loop gain dB at 1 Hz, unity-gain frequency Hz, phase margin deg), solved on the
    exact loop gain with scipy's brentq, independent of amploop's margin code."""

    def mag_minus_one(log_f: float) -> float:
        return abs(exact_loop_gain(model, np.array([10.0**log_f]))[0]) - 1.0

    log_ugf = brentq(mag_minus_one, 0.0, 10.0, xtol=1e-13)
    ugf = 10.0**log_ugf
    t = exact_loop_gain(model, np.array([ugf]))[0]
    pm = 180.0 + np.degrees(np.angle(t))  # phase at crossover lies in (-180°, 0°) here
    dc_db = 20 * np.log10(abs(exact_loop_gain(model, np.array([1.0]))[0]))
    return dc_db, ugf, pm


@pytest.mark.parametrize("model", [RESISTIVE, CAPACITIVE], ids=["resistive", "capacitive"])
def test_loop_gain_matches_exact_nodal_solution(model, macro_job, tmp_path):
    job = load_job(macro_job(model))
    result = measure(job, out=tmp_path / "out", workers=1)
    corner = result.corners[0]
    assert corner.status == "ok", corner.error
    response = corner.loop_gain
    in_band = response.frequency_hz <= 1e9
    exact = exact_loop_gain(model, response.frequency_hz[in_band])
    relative = np.abs(response.values[in_band] - exact) / np.abs(exact)
    assert relative.max() < 1e-6, f"worst relative error {relative.max():.2e}"

    dc_db, ugf, pm = exact_margins(model)
    margins = corner.margins
    assert margins.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert margins.unity_gain_hz == pytest.approx(ugf, rel=1e-3)
    assert margins.dc_loop_gain_db == pytest.approx(dc_db, abs=0.01)


def test_loading_of_the_feedback_network_is_in_the_loop_gain(macro_job, tmp_path):
    """A 5 kΩ divider loads the 100 kΩ output: the DC loop gain must reflect it.

    Hand calculation (common practice): T0 = gm1·R1 · gm2·(R2 ∥ (Rin+Rfb)) · Rin/(Rin+Rfb).
    """
    model = Macromodel(kind="resistive", z_in=2.5e3, z_fb=2.5e3, cc=2e-12, rc=1e3)
    result = measure(load_job(macro_job(model)), out=tmp_path / "out", workers=1)
    r_load = 1 / (1 / model.r2 + 1 / (model.z_in + model.z_fb))
    t0 = model.gm1 * model.r1 * model.gm2 * r_load * model.z_in / (model.z_in + model.z_fb)
    assert result.corners[0].margins.dc_loop_gain_db == pytest.approx(20 * np.log10(t0), abs=0.01)


def test_lc_break_misses_the_loading_that_double_injection_keeps(macro_job, tmp_path):
    """Heavy resistive feedback (5 kΩ total against a 100 kΩ output resistance).

    Double injection matches the exact return ratio; the large-L/large-C break leaves the
    feedback network off the amplifier output at AC and overstates the DC loop gain by
    the loading factor R2/(R2 ∥ 5 kΩ) = 21 (26.4 dB); with these values (measured when the
    test was written) it reads the phase margin 6.6° too low and the unity-gain frequency
    15 % too high. The test asserts more than 3° and 10 %.
    """
    model = Macromodel(kind="resistive", z_in=2.5e3, z_fb=2.5e3, cc=1e-12, rc=1e3, cl=10e-12)
    dc_db, ugf, pm = exact_margins(model)
    true = measure(load_job(macro_job(model)), out=tmp_path / "di", workers=1).corners[0]
    naive = measure(load_job(macro_job(model, probe="lc")), out=tmp_path / "lc",
                    workers=1).corners[0]
    assert true.margins.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert true.margins.dc_loop_gain_db == pytest.approx(dc_db, abs=0.01)
    loading_db = 20 * np.log10(model.r2 / (1 / (1 / model.r2 + 1 / (model.z_in + model.z_fb))))
    assert naive.margins.dc_loop_gain_db - dc_db == pytest.approx(loading_db, abs=0.05)
    assert pm - naive.margins.phase_margin_deg > 3.0
    assert naive.margins.unity_gain_hz / ugf - 1 > 0.10


@pytest.mark.parametrize("probe", ["double-injection", "lc"])
def test_the_written_deck_gives_the_loop_gain_amploop_measured(probe, macro_job, tmp_path):
    """Reference: ngspice itself, in batch mode (``ngspice -b``) on the deck ``measure``
    leaves in decks/, computing the loop gain with the probe's own formula in the deck's
    ``.control`` block; amploop's loop gain (from the vectors it read) must agree at every
    frequency, and at 10 Hz, 1 MHz and 100 MHz in particular (wrdata keeps 9 digits)."""
    out = tmp_path / "out"
    corner = measure(load_job(macro_job(RESISTIVE, probe=probe)), out=out,
                     workers=1).corners[0]
    assert corner.status == "ok", corner.error
    decks = out / "decks"
    deck = decks / f"{corner.corner.name}.cir"
    assert "let loop_gain" in deck.read_text()
    proc = subprocess.run(["ngspice", "-b", deck.name], cwd=decks, capture_output=True,
                          text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stdout[-800:] + proc.stderr[-800:]
    by_hand = np.loadtxt(decks / f"{corner.corner.name}-loop_gain.txt")
    measured = corner.loop_gain
    np.testing.assert_allclose(by_hand[:, 0], measured.frequency_hz, rtol=1e-8)
    np.testing.assert_allclose(by_hand[:, 1] + 1j * by_hand[:, 2], measured.values, rtol=1e-6)
    for f in (10.0, 1e6, 1e8):
        i = int(np.argmin(np.abs(measured.frequency_hz - f)))
        assert abs(by_hand[i, 1] + 1j * by_hand[i, 2] - measured.values[i]) \
            < 1e-6 * abs(measured.values[i])


def test_margins_of_several_corners_each_match(macro_job, tmp_path):
    """Three loads, three different loops: each corner against its own exact solution."""
    loads = {"light": 0.5e-12, "typical": 2e-12, "heavy": 8e-12}
    job = load_job(macro_job(RESISTIVE, corners=loads))
    result = measure(job, out=tmp_path / "out", workers=2)
    assert [c.corner.name for c in result.corners] == list(loads)
    for corner in result.corners:
        _, ugf, pm = exact_margins(RESISTIVE.with_(cl=loads[corner.corner.name]))
        assert corner.margins.phase_margin_deg == pytest.approx(pm, abs=0.05)
        assert corner.margins.unity_gain_hz == pytest.approx(ugf, rel=1e-3)
    assert result.ac_run == 2 * len(loads)
