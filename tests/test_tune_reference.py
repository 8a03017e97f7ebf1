"""Tuning on the linear macromodel over several corners, against the exact nodal model.

References: tests/nodal.py (exact loop gain of the two-stage macromodel by nodal analysis,
Bode's return ratio); an exhaustive (Cc, Rc) grid search on that exact model written in
this file (its margins by its own dense sampling, not amploop's); textbook facts of the
two-stage procedure (common practice, values from trigonometry).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import control
import numpy as np
import pytest
from nodal import Macromodel, dense_margins, exact_loop_gain

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.twostage import (
    lead_ratio,
    lead_resistor,
    rhp_zero_rad_s,
    starting_cc,
    where_phase_is,
)
from amploop.corners.measure import measure
from amploop.sim.pool import WorkerPool
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

# Three corners that differ in gm, load and feedback factor (invented values).
CORNERS = {
    "slow": Macromodel(gm1=70e-6, gm2=0.7e-3, cl=3e-12, z_in=10e3, z_fb=10e3),
    "typical": Macromodel(gm1=100e-6, gm2=1e-3, cl=2e-12, z_in=10e3, z_fb=20e3),
    "fast": Macromodel(gm1=140e-6, gm2=1.4e-3, cl=1e-12, z_in=10e3, z_fb=40e3),
}
TARGET_PM, TOLERANCE, GM_MIN = 65.0, 1.0, 10.0
CC_BOUNDS, RC_BOUNDS = (0.1e-12, 20e-12), (0.0, 5e3)


def write_job(folder: Path) -> Path:
    """A job whose corners set gm1, gm2, the load and the feedback resistors."""
    folder.mkdir(parents=True, exist_ok=True)
    base = Macromodel()
    (folder / "macro.cir").write_text(f"""* linear two-stage macromodel, corner-dependent gm (test data, invented)
.param cc=1p rc=0
.subckt macro inp inn out
G1 n1 0 inp inn {{gm1}}
R1 n1 0 {base.r1!r}
C1 n1 0 {base.c1!r}
G2 out 0 n1 0 {{gm2}}
R2 out 0 {base.r2!r}
C2 out 0 {base.c2!r}
Rc n1 nz {{rc}}
Cc nz out {{cc}}
.ends
""")
    corners = "".join(
        f'[[corners]]\nname = "{name}"\nparams = {{ gm1 = {m.gm1!r}, gm2 = {m.gm2!r}, '
        f'cl = {m.cl!r}, zin = {m.z_in!r}, zfb = {m.z_fb!r} }}\n'
        for name, m in CORNERS.items())
    (folder / "job.toml").write_text(f"""name = "macro-corners"
[amplifier]
netlist = "macro.cir"
subckt = "macro"
in_p = "inp"
in_n = "inn"
out = "out"
[bias]
common_mode = "0.9"
[feedback]
kind = "resistive"
input = "{{zin}}"
feedback = "{{zfb}}"
load = "{{cl}}"
[compensation]
cc = {{ param = "cc", min = "{CC_BOUNDS[0]!r}", max = "{CC_BOUNDS[1]!r}" }}
rc = {{ param = "rc", min = "{RC_BOUNDS[0]!r}", max = "{RC_BOUNDS[1]!r}" }}
[target]
phase_margin = {TARGET_PM}
tolerance = {TOLERANCE}
gain_margin = {GM_MIN}
{corners}""")
    return folder / "job.toml"


# --- the test's own exhaustive search on the exact model -------------------------------

_F = np.logspace(0, 10, 1001)  # 100 points per decade


def _exact_grid(model: Macromodel, cc: np.ndarray, rc: np.ndarray) -> np.ndarray:
    out = np.empty((cc.size, rc.size, _F.size), dtype=complex)
    for i, c in enumerate(cc):
        for j, r in enumerate(rc):
            out[i, j] = exact_loop_gain(model.with_(cc=float(c), rc=float(r)), _F)
    return out


def _dense_margins(t: np.ndarray):
    """(PM deg, UGF Hz, GM dB) per loop gain on ``_F`` (:func:`nodal.dense_margins`)."""
    return dense_margins(_F, t)


def exhaustive_optimum() -> tuple[float, float, float]:
    """Max worst-corner UGF s.t. worst PM ≥ target and GM ≥ minimum, on grids that zoom in."""
    cc = np.geomspace(*CC_BOUNDS, 24)
    rc = np.concatenate([[0.0], np.geomspace(5.0, RC_BOUNDS[1], 23)])
    best = None
    for _ in range(3):
        worst_pm = np.full((cc.size, rc.size), np.inf)
        worst_ugf = np.full((cc.size, rc.size), np.inf)
        worst_gm = np.full((cc.size, rc.size), np.inf)
        for model in CORNERS.values():
            pm, ugf, gm = _dense_margins(_exact_grid(model, cc, rc))
            worst_pm = np.fmin(worst_pm, np.where(np.isnan(pm), -np.inf, pm))
            worst_ugf = np.fmin(worst_ugf, np.where(np.isnan(ugf), 0, ugf))
            worst_gm = np.fmin(worst_gm, gm)
        feasible = (worst_pm >= TARGET_PM) & (worst_gm >= GM_MIN)
        score = np.where(feasible, worst_ugf, -np.inf)
        i, j = np.unravel_index(np.argmax(score), score.shape)
        best = (float(score[i, j]), float(cc[i]), float(rc[j]))
        cc = np.geomspace(cc[max(i - 1, 0)], cc[min(i + 1, cc.size - 1)], 9)
        rc = np.linspace(rc[max(j - 1, 0)], rc[min(j + 1, rc.size - 1)], 9)
    return best


# --- tests -----------------------------------------------------------------------------


def test_map_prediction_equals_direct_simulation(tmp_path):
    """Three simulated samples per corner predict the loop gain at other (Cc, Rc) as
    ngspice simulates it there: within 1e-6 relative (extra element theorem)."""
    job = load_job(write_job(tmp_path / "job"))
    samples = [(0.3e-12, 1e3), (1e-12, 1e3), (4e-12, 1e3)]
    queries = [(0.15e-12, 0.0), (0.8e-12, 2.5e3), (2.2e-12, 300.0), (15e-12, 5e3)]
    with WorkerPool(2) as pool:
        sims = {}
        for cc, rc in samples + queries:
            result = measure(job, overrides={"cc": cc, "rc": rc}, pool=pool)
            sims[(cc, rc)] = {c.corner.name: c.loop_gain for c in result.corners}
    for name in CORNERS:
        cmap = CompensationMap.from_loop_gains(samples, [sims[s][name] for s in samples])
        # up to 1 GHz: ngspice turns Rc = 0 into 1 mΩ, which is 1e-5 of the branch's
        # impedance at 10 GHz with the smallest Cc here and shows there at 2e-6
        band = cmap.frequency_hz <= 1e9
        for q in queries:
            predicted = cmap.loop_gain(*q).values[band]
            simulated = sims[q][name].values[band]
            relative = np.max(np.abs(predicted - simulated) / np.abs(simulated))
            assert relative < 1e-6, (name, q, relative)


@pytest.fixture(scope="module")
def tuned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tune")
    job_path = write_job(folder / "job")
    result = tune(load_job(job_path), out=folder / "out", strategy="map", workers=2)
    return job_path, folder / "out", result


def test_map_tuning_meets_the_target_within_tolerance(tuned):
    _, out, result = tuned
    assert result.status == "converged", result.outcome.message
    worst = result.outcome.final.worst
    assert TARGET_PM <= worst.phase_margin_deg <= TARGET_PM + TOLERANCE
    assert worst.gain_margin_db is None or worst.gain_margin_db >= GM_MIN
    data = json.loads((out / "results.json").read_text())
    assert data["status"] == "converged" and data["command"] == "tune"
    assert data["values"]["cc"] == result.outcome.values["cc"]
    assert data["worst"]["phase_margin_corner"] in CORNERS
    assert data["worst"]["unity_gain_corner"] in CORNERS
    assert data["target"] == {"phase_margin_deg": TARGET_PM, "tolerance_deg": TOLERANCE,
                              "gain_margin_db": GM_MIN, "objective": "bandwidth",
                              "settling_time_s": None}


def test_map_tuning_is_confirmed_by_the_exact_model(tuned):
    """The chosen values, put into the exact nodal model: every corner within 0.05° of
    what amploop verified, and none below the target."""
    _, _, result = tuned
    values = result.outcome.values
    for corner in result.corners:
        model = CORNERS[corner.corner.name].with_(cc=values["cc"], rc=values["rc"])
        t = exact_loop_gain(model, _F)
        pm, _ugf, _ = _dense_margins(t[None, :])
        assert pm[0] == pytest.approx(corner.margins.phase_margin_deg, abs=0.05)
        assert pm[0] >= TARGET_PM - 0.05


def test_map_tuning_finds_the_bandwidth_of_an_exhaustive_search(tuned):
    """Worst-corner unity-gain frequency within 1 % of the exhaustive grid's optimum."""
    _, _, result = tuned
    best_ugf, best_cc, best_rc = exhaustive_optimum()
    ours = result.outcome.final.worst.unity_gain_hz
    assert ours == pytest.approx(best_ugf, rel=0.01), (ours, best_ugf, best_cc, best_rc)


def test_map_tuning_uses_at_most_ten_ac_analyses_per_corner(tuned):
    _, _, result = tuned
    assert (result.ac_run + result.ac_reused) <= 10 * len(CORNERS)


def test_infeasible_is_an_answer(tmp_path):
    """With Cc held to 0.1–0.2 pF and no Rc, 65° is out of reach at the slow corner:
    status infeasible, naming the limiting corner, the best reachable worst-corner margin
    and the values that reach it, all verified by simulation."""
    job_path = write_job(tmp_path / "job")
    text = job_path.read_text().replace(f'max = "{CC_BOUNDS[1]!r}"', 'max = "2e-13"')
    job_path.write_text(text.replace(f'max = "{RC_BOUNDS[1]!r}"', 'max = "0"'))
    result = tune(load_job(job_path), out=tmp_path / "out", workers=2)
    assert result.status == "infeasible", result.outcome.message
    worst = result.outcome.final.worst
    assert worst.phase_margin_deg < TARGET_PM
    assert result.outcome.values["cc"] == pytest.approx(2e-13)  # the most Cc allowed
    assert worst.phase_margin_corner in result.outcome.message
    assert f"{worst.phase_margin_deg:.2f}" in result.outcome.message
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["status"] == "infeasible"


def test_cc_alone_around_a_fixed_rc_is_confirmed_by_the_exact_model(tmp_path):
    """No rc entry and Rc = 1.5 kΩ fixed in the netlist: the map (Z = 1/(sCc), the fixed
    Rc inside its coefficients) tunes Cc alone. Each corner's verified phase margin equals
    the exact nodal model's at (Cc, 1.5 kΩ) within 0.05°, the worst lands in the target
    window, and a Cc 1 % smaller (more bandwidth) would miss the target on the exact model
    (the margin rises with Cc on this loop)."""
    job_path = write_job(tmp_path / "job")
    text = job_path.read_text()
    job_path.write_text("\n".join(line for line in text.splitlines()
                                  if not line.startswith("rc = ")))
    netlist = tmp_path / "job" / "macro.cir"
    netlist.write_text(netlist.read_text().replace(".param cc=1p rc=0", ".param cc=1p rc=1500"))
    result = tune(load_job(job_path), out=tmp_path / "out", workers=2, time_domain=False)
    assert result.status == "converged", result.outcome.message
    assert set(result.outcome.values) == {"cc"}
    cc = result.outcome.values["cc"]
    worst = result.outcome.final.worst
    assert TARGET_PM <= worst.phase_margin_deg <= TARGET_PM + TOLERANCE
    exact_pms = []
    for corner in result.corners:
        model = CORNERS[corner.corner.name]
        pm, _, _ = _dense_margins(exact_loop_gain(model.with_(cc=cc, rc=1500.0), _F)[None, :])
        assert pm[0] == pytest.approx(corner.margins.phase_margin_deg, abs=0.05)
        smaller, _, _ = _dense_margins(
            exact_loop_gain(model.with_(cc=0.99 * cc, rc=1500.0), _F)[None, :])
        exact_pms.append((pm[0], smaller[0]))
    assert min(p for p, _ in exact_pms) >= TARGET_PM - 0.05
    assert min(s for _, s in exact_pms) < TARGET_PM + 0.1 * TOLERANCE


# --- textbook facts (common practice) ---------------------------------------------------


@pytest.mark.parametrize("lead_deg", [20.0, 30.0, 45.0])
def test_the_lead_zero_placed_by_the_textbook_relations_adds_its_share_at_the_crossover(
        lead_deg):
    """The textbook two-pole Miller loop T = β·gm1·R1·gm2·R2·(1 + s·Cc·(Rc − 1/gm2)) /
    ((1 + s/p1)(1 + s/p2)), p1 = 1/(gm2·R2·Cc·R1), p2 = gm2/CL (Gray, Hurst, Lewis,
    Meyer, ch. 9; common practice), written here as python-control transfer functions.
    With Rc = 1/gm2 it has no zero; its crossover ωt is python-control's. amploop's
    lead_ratio and lead_resistor then put the zero at k·ωt (rhp_zero_rad_s: −k·ωt, a
    left-half-plane one), and the phase at ωt rises by lead_deg = atan(1/k) (trigonometry),
    0.001° (python-control's frequency response)."""
    model = CORNERS["typical"]
    beta = model.z_in / (model.z_in + model.z_fb)
    cc = starting_cc(beta, model.gm1, model.cl, model.gm2)
    gain = beta * model.gm1 * model.r1 * model.gm2 * model.r2
    p1, p2 = 1 / (model.gm2 * model.r2 * cc * model.r1), model.gm2 / model.cl

    def loop(rc: float) -> control.TransferFunction:
        den = np.polymul([1 / p1, 1.0], [1 / p2, 1.0])
        return control.tf([gain * cc * (rc - 1 / model.gm2), gain], den)

    plain = loop(1 / model.gm2)
    _, _, _, _, omega_t, _ = control.stability_margins(plain)
    k = lead_ratio(lead_deg)
    rc = lead_resistor(model.gm2, k, omega_t, cc)
    assert rhp_zero_rad_s(cc, model.gm2, rc) == pytest.approx(-k * omega_t, rel=1e-9)
    lead = loop(rc)
    added = np.degrees(np.angle(lead(1j * omega_t) / plain(1j * omega_t)))
    assert added == pytest.approx(lead_deg, abs=1e-3)


def test_fifty_five_degrees_is_read_where_the_phase_is_minus_125():
    """PM = 180° + ∠L: a 55° margin needs the crossover where the phase is −125°."""
    from amploop.analysis.loopgain import FrequencyResponse

    f = np.logspace(0, 10, 401)
    s = 2j * np.pi * f
    response = FrequencyResponse(f, 1e4 / ((1 + s / (2 * np.pi * 1e3)) * (1 + s / (2 * np.pi * 2e7))))
    found = where_phase_is(response, -(180 - 55))
    p1, p2 = 1e3, 2e7
    phase_at = -math.degrees(math.atan(found[0] / p1) + math.atan(found[0] / p2))
    assert phase_at == pytest.approx(-125.0, abs=0.01)


def test_first_textbook_step_gives_about_45_degrees_on_a_two_pole_loop():
    """Cc = β·gm1·CL/gm2 puts ωt at the second pole: about 45°, a little more with the pole
    splitting counted (checked on the exact model of the typical corner)."""
    model = CORNERS["typical"]
    beta = model.z_in / (model.z_in + model.z_fb)
    cc = starting_cc(beta, model.gm1, model.cl, model.gm2)
    t = exact_loop_gain(model.with_(cc=cc, rc=0.0), _F)
    pm, _, _ = _dense_margins(t[None, :])
    assert 40.0 <= pm[0] <= 60.0
