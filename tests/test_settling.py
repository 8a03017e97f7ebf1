"""Settling time predicted from closed-loop frequency responses, against exact step responses.

References:
- The macromodel's exact closed-loop transfer v(out)/v(sig) by nodal analysis (tests/nodal.py:
  Y(s)·v = b(s) solved, and N/D by Cramer's rule; textbook two-stage model, Gray, Hurst,
  Lewis, Meyer, ch. 9), its step response by partial fractions (own method, nodal.py).
- That step response checked against scipy.signal.step on a state-space model derived here
  from the nodal matrices (algebraic nodes eliminated by a Schur complement).
- ngspice's own transient of amploop's step deck, for the map built from three simulated
  closed-loop responses.
The macromodel's element values are invented test data (nodal.py).
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import scipy.signal
from nodal import (
    Macromodel,
    exact_closed_loop,
    exact_step,
    exact_step_terms,
    nodal_matrices,
    signal_injection,
)
from scipy.optimize import brentq

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.settling import aaa_fit, settling_time, settling_times
from amploop.analysis.timedomain import step_metrics

FREQ = np.logspace(0, 10, 401)          # the sweep 1 Hz–10 GHz at 40 points per decade
BAND = 1e-3
MODEL = Macromodel(kind="resistive", z_in=10e3, z_fb=20e3, gm1=300e-6, cl=2e-12)
SAMPLES = ((0.7e-12, 0.0), (2e-12, 5e3), (4e-12, 50e3))
#: (Cc F, Rc Ω); the last: the lead zero well below the crossover, a closed-loop pole
#: at 0.76 MHz with 5 % of the step (its slow tail sets the 0.1 % settling)
POINTS = [(1.5e-12, 800.0), (1e-12, 3e3), (3e-12, 20e3), (2.5e-12, 1e-3), (1e-12, 200e3)]


def closed_loop_map(model: Macromodel, samples=SAMPLES) -> CompensationMap:
    """A map from the exact closed-loop response at three (Cc, Rc) samples."""
    responses = [FrequencyResponse(FREQ, exact_closed_loop(model.with_(cc=cc, rc=rc), FREQ))
                 for cc, rc in samples]
    return CompensationMap.from_loop_gains(samples, responses)


def exact_settling(model: Macromodel, band: float = BAND) -> float:
    """The settling time of the exact step (nodal.py), by dense sampling over 60 of the
    slowest time constants and brentq on the last crossing of the band."""
    h0, _, p = exact_step_terms(model)
    t = np.linspace(0, 60 / np.abs(p.real).min(), 400_001)
    excursion = np.abs(exact_step(model, t) - h0) / abs(h0)
    last = int(np.nonzero(excursion > band)[0][-1])

    def f(x):
        return abs(exact_step(model, np.array([x]))[0] - h0) / abs(h0) - band

    return brentq(f, t[last], t[last + 1], xtol=1e-16)


def state_space(model: Macromodel) -> scipy.signal.StateSpace:
    """x' = Ax + Bu, y = Cx + Du of the closed loop from G·v + C·v' = b_g·u + b_c·u'.

    Nodes without capacitance are algebraic: eliminated by the Schur complement of G. The
    input derivative is absorbed by ξ = v_d − C⁻¹b_c·u: C·ξ' + Ĝξ = (b̂ − Ĝ·C⁻¹b_c)·u."""
    g, c = nodal_matrices(model)
    b_g, b_c = signal_injection(model)
    dyn = np.nonzero(np.abs(c).sum(axis=1) > 0)[0]
    alg = np.setdiff1d(np.arange(g.shape[0]), dyn)
    assert not b_c[alg].any()
    gaa_inv = np.linalg.inv(g[np.ix_(alg, alg)])
    g_hat = g[np.ix_(dyn, dyn)] - g[np.ix_(dyn, alg)] @ gaa_inv @ g[np.ix_(alg, dyn)]
    b_hat = b_g[dyn] - g[np.ix_(dyn, alg)] @ gaa_inv @ b_g[alg]
    c_inv = np.linalg.inv(c[np.ix_(dyn, dyn)])
    shift = c_inv @ b_c[dyn]
    out = np.zeros(dyn.size)
    out[list(dyn).index(3)] = 1.0
    return scipy.signal.StateSpace(-c_inv @ g_hat, (c_inv @ (b_hat - g_hat @ shift))[:, None],
                                   out[None, :], [[out @ shift]])


@pytest.mark.parametrize("kind", ["resistive", "capacitive"])
def test_closed_loop_response_is_bilinear_in_the_branch_impedance(kind):
    """Three samples fix H(Z); the fourth and fifth points are predicted to 1e-6 (exact
    nodal response); a response that is not bilinear in Z would miss by far more."""
    model = MODEL if kind == "resistive" else Macromodel(
        kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9, cl=3e-12)
    cmap = closed_loop_map(model)
    for cc, rc in POINTS:
        exact = exact_closed_loop(model.with_(cc=cc, rc=rc), FREQ)
        predicted = cmap.loop_gain_values(cc, rc)
        assert np.max(np.abs(predicted - exact) / np.abs(exact)) < 1e-6, (cc, rc)


@pytest.mark.parametrize("cc, rc", POINTS)
def test_exact_step_agrees_with_scipy_state_space(cc, rc):
    """nodal.py's partial-fraction step response against scipy.signal.step on the state
    space derived here; the settling time read from scipy's samples (timedomain's
    step_metrics, linear interpolation on 20 000 samples) agrees within 0.2 %."""
    model = MODEL.with_(cc=cc, rc=rc)
    exact = exact_settling(model)
    t = np.linspace(0, 6 * exact, 20_001)
    _, y = scipy.signal.step(state_space(model), T=t)
    h0 = exact_step_terms(model)[0]
    assert np.max(np.abs(y - exact_step(model, t))) < 1e-7 * abs(h0)  # 1 mΩ: stiff
    # a pre-step sample at 0 V, then scipy's samples; step at t = 0
    metrics = step_metrics(np.concatenate([[-t[1]], t]), np.concatenate([[0.0], y]), 0.0, BAND)
    assert metrics.final_v == pytest.approx(h0, rel=1e-6)
    assert metrics.settling_s == pytest.approx(exact, rel=2e-3)


@pytest.mark.parametrize("cc, rc", POINTS)
def test_predicted_settling_from_the_map_matches_the_exact_step(cc, rc):
    """The map's H at (Cc, Rc) on the sweep grid → rational fit → settling into 0.1 %,
    within 1 % of the exact step's (the doublet case included); also at 1 %."""
    model = MODEL.with_(cc=cc, rc=rc)
    predicted = closed_loop_map(MODEL).loop_gain_values(cc, rc)
    fit = aaa_fit(FREQ, predicted)
    for band in (BAND, 1e-2):
        assert settling_time(fit, band) == pytest.approx(exact_settling(model, band), rel=1e-2)


def test_doublet_tail_sets_the_settling():
    """The doublet point: its slow pole's term alone is above the band for most of the
    settling time (so the test exercises the slow tail, not the fast ringing)."""
    model = MODEL.with_(cc=1e-12, rc=200e3)
    h0, c, p = exact_step_terms(model)
    slow = np.argmin(np.abs(p.real))
    t_slow = np.log(abs(c[slow]) / (BAND * abs(h0))) / -p.real[slow]
    assert 0.05 < abs(c[slow]) / abs(h0) and t_slow > 0.8 * exact_settling(model)


def test_settling_in_a_window_matches_step_metrics_with_a_droop():
    """Capacitive feedback with a 1 GΩ DC path: H(0) = 0, the step droops with 1 ms. Over a
    2 µs window the prediction equals step_metrics on the exact step sampled there."""
    model = Macromodel(kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9, cl=3e-12,
                       cc=1.5e-12, rc=1.5e3)
    window = 2e-6
    t = np.linspace(0, window, 400_001)
    y = exact_step(model, t)
    # 0 V before the step; the step half a sample before t = 0 (y(0⁺) = H(∞) ≠ 0 here)
    reference = step_metrics(np.concatenate([[-t[1]], t]), np.concatenate([[0.0], y]),
                             -0.5 * t[1], BAND).settling_s
    fit = aaa_fit(FREQ, exact_closed_loop(model, FREQ))
    assert abs(fit.dc_gain) < 1e-3 * abs(fit.step(window))  # the droop: H(0) ≈ 0
    assert settling_time(fit, BAND, window_s=window) == pytest.approx(reference, rel=1e-2)


def test_unstable_response_does_not_settle():
    """Invented H(s) = ω³/((s + ω)(s² − 0.2ωs + ω²)), ω = 2π·10 MHz: a right-half-plane
    pair by construction; its samples give no settling time, while the same with +0.2ω
    (stable by construction) settles (the reference: scipy.signal.step of that H)."""
    w = 2 * np.pi * 10e6
    s = 2j * np.pi * FREQ
    for sign in (-1, 1):
        h = w**3 / ((s + w) * (s * s + sign * 0.2 * w * s + w * w))
        fit = aaa_fit(FREQ, h)
        if sign < 0:
            assert settling_time(fit) is None
            continue
        system = scipy.signal.TransferFunction([w**3], np.polymul([1, w], [1, 0.2 * w, w * w]))
        t = np.linspace(0, 200 / w, 200_001)
        _, y = scipy.signal.step(system, T=t)
        reference = step_metrics(np.concatenate([[-t[1]], t]), np.concatenate([[0.0], y]),
                                 -0.5 * t[1], BAND).settling_s
        assert settling_time(fit) == pytest.approx(reference, rel=1e-3)


def test_a_grid_of_100_points_is_fast():
    """100 (Cc, Rc) points from the map in under 1.5 s on a shared core (measured when
    written: about 0.3 s); every point stable here agrees with the exact step within 1 %."""
    cmap = closed_loop_map(MODEL)
    cc = np.linspace(0.8e-12, 4e-12, 10)[:, None]
    rc = np.linspace(0.0, 20e3, 10)[None, :]
    responses = cmap.loop_gain_values(cc, rc)
    started = time.perf_counter()
    times = settling_times(FREQ, responses, BAND)
    seconds = time.perf_counter() - started
    assert seconds < 1.5, seconds
    for i, j in [(0, 0), (3, 7), (9, 9), (5, 2)]:
        exact = exact_settling(MODEL.with_(cc=float(cc[i, 0]), rc=float(rc[0, j])))
        assert times[i, j] == pytest.approx(exact, rel=1e-2)


def test_deck_is_unchanged_without_the_closed_loop_run(macro_job):
    """Off (the default), the deck and steps are exactly today's, so journal keys stay; on,
    the same deck with the closed-loop steps between the probes' runs and the op read-out."""
    from amploop.bench.amplifier import prepare_amplifier
    from amploop.bench.testbench import build_testbench
    from amploop.spec.job import load_job

    job = load_job(macro_job(MODEL))
    amplifier = prepare_amplifier(job)
    corner = job.corners[0]
    plain = build_testbench(amplifier, corner, {})
    off = build_testbench(amplifier, corner, {}, closed_loop=False)
    on = build_testbench(amplifier, corner, {}, closed_loop=True)
    assert (off.deck, off.steps) == (plain.deck, plain.steps)
    assert on.deck == plain.deck
    assert on.steps[:-1][: len(plain.steps) - 1] == plain.steps[:-1]
    assert on.steps[-1] == plain.steps[-1]
    assert [s.command for s in on.steps[len(plain.steps) - 1:-1]] == [
        "alter itb_shunt acmag=0", "alter vsig acmag=1", plain.steps[0].command]


def test_map_from_ngspice_predicts_ngspice_step_settling(macro_job):
    """Three closed-loop AC runs of ngspice (amploop's loop-gain deck with the closed-loop
    run) build the map; the settling predicted at two other points, one of them the
    doublet, against ngspice's transient of amploop's step deck (its own step check, same
    band, same window). Agreement measured when written: −0.17 % (92 ns) and −0.02 % (0.82 µs,
    the doublet); asserted 2 %. The simulated closed loop itself matches nodal.py to 1e-6."""
    from amploop.bench.amplifier import prepare_amplifier
    from amploop.bench.testbench import build_testbench
    from amploop.corners.stepcheck import run_step_checks
    from amploop.sim.pool import WorkerPool
    from amploop.sim.runner import Runner
    from amploop.spec.job import load_job

    job = load_job(macro_job(MODEL))
    amplifier = prepare_amplifier(job)
    corner = job.corners[0]
    benches = {s: build_testbench(amplifier, corner, {"cc": s[0], "rc": s[1]},
                                  closed_loop=True, label=f"sample {s}") for s in SAMPLES}
    with WorkerPool(2) as pool:
        runner = Runner(pool)
        outputs = {tag: out for tag, out, _ in runner.run(
            [(s, b.request(60.0)) for s, b in benches.items()])}
        responses = [benches[s].closed_loop_response(outputs[s]) for s in SAMPLES]
        cmap = CompensationMap.from_loop_gains(SAMPLES, responses)
        # the simulated closed loop against the exact one (nodal.py)
        for s, response in zip(SAMPLES, responses):
            exact = exact_closed_loop(MODEL.with_(cc=s[0], rc=max(s[1], 1e-3)),
                                      response.frequency_hz)
            assert np.max(np.abs(response.values / exact - 1)) < 1e-6
        for cc, rc in [(1.5e-12, 800.0), (1e-12, 200e3)]:
            stop = 4e-6
            check = run_step_checks(amplifier, (corner,), {"cc": cc, "rc": rc}, runner, stop,
                                    60.0)[corner.name]
            fit = aaa_fit(cmap.frequency_hz, cmap.loop_gain_values(cc, rc))
            predicted = settling_time(fit, job.transient.band,
                                      window_s=stop - check.step_at_s)
            measured = check.metrics.settling_s
            assert predicted == pytest.approx(measured, rel=2e-2), (cc, rc, predicted, measured)


def test_a_harmless_right_half_plane_pole_of_a_fit_is_left_out_within_a_window():
    """A one-pole step (invented: 10 Mrad/s, unit gain) with a fit's artefact beside it, a
    pole at +3 Hz of negligible weight: within a 2 µs window it changes nothing, so the
    settling time is the clean one, ln(1/band)/10 Mrad/s (textbook first-order settling);
    the same pole with real weight is no artefact, and the response does not settle."""
    from amploop.analysis.settling import PoleResidueModel, settling_time

    clean = PoleResidueModel(poles=np.array([-1e7 + 0j]), residues=np.array([1e7 + 0j]),
                             direct=0j)
    expected = np.log(1 / 1e-3) / 1e7
    assert settling_time(clean, 1e-3, window_s=2e-6) == pytest.approx(expected, rel=1e-3)
    artefact = 2 * np.pi * 3.0
    for weight, settles in ((1e-9, True), (1e-2, False)):
        model = PoleResidueModel(poles=np.array([-1e7 + 0j, artefact + 0j]),
                                 residues=np.array([1e7 + 0j, weight * artefact + 0j]),
                                 direct=0j)
        value = settling_time(model, 1e-3, window_s=2e-6)
        if settles:
            assert value == pytest.approx(expected, rel=1e-3)
        else:
            assert value is None
