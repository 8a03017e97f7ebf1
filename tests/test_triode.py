"""A MOSFET in triode standing in for the lead resistor.

References: the Shichman–Hodges (level-1) triode conductance g_ds = KP·(W/L)·(VGS − VTO)
at VDS = 0 (the ngspice manual's level-1 MOSFET; Sedra & Smith, "Microelectronic
Circuits", ch. 5); the simulator itself, independently, for the tuned demo (a fresh
measurement of the compensated netlist).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import DEMO

from amploop.analysis.triode import (
    in_triode,
    resistance_at_size,
    resistance_share_during,
    size_for_resistance,
    square_law_resistance,
)
from amploop.bench.requests import AnalysisRequest, Step
from amploop.cli import main
from amploop.corners.measure import measure
from amploop.sim.ngspice import NgspiceSession
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

KP, VTO, W, L = 280e-6, 0.45, 3e-6, 1e-6


@pytest.fixture(scope="module")
def session():
    return NgspiceSession()


@pytest.mark.parametrize("vgs", [0.8, 1.2, 1.8])
def test_level1_conductance_at_vds_zero_is_kp_w_over_l_vov(session, vgs):
    """ngspice's level-1 g_ds at VDS = 0 against KP·(W/L)·(VGS − VTO): within 0.5 %."""
    deck = f"""level-1 triode check
.model n1 nmos level=1 vto={VTO} kp={KP} lambda=0 gamma=0 ld=0
Vd d 0 dc 0.3
Vg g 0 dc {0.3 + vgs}
M1 d g d 0 n1 w={W} l={L}
.end
"""
    steps = (Step("op"), Step("let g = @m1[gds]", ("g",)))
    out = session.run(AnalysisRequest("triode", deck, steps))
    gds = float(out.reads[1]["g"].real[0])
    expected = KP * (W / L) * (vgs - VTO)
    assert gds == pytest.approx(expected, rel=5e-3)
    assert 1 / gds == pytest.approx(square_law_resistance(KP, W, L, vgs - VTO), rel=5e-3)


def test_square_law_scaling_with_size():
    """R ∝ 1/W (and 1/m), R ∝ L; the inverse gives the size back."""
    assert resistance_at_size(1e3, 2e-6, 4e-6, "w") == pytest.approx(500.0)
    assert resistance_at_size(1e3, 1.0, 3.0, "m") == pytest.approx(1e3 / 3)
    assert resistance_at_size(1e3, 1e-6, 2e-6, "l") == pytest.approx(2e3)
    assert size_for_resistance(1e3, 2e-6, 250.0, "w") == pytest.approx(8e-6)
    assert in_triode(1.2, 0.0, 0.6) and not in_triode(0.2, 0.0, 0.0)
    # a 10 mV swing of VGS on 0.5 V of overdrive moves g_ds by 2 %
    assert resistance_share_during([1.0, 1.01, 0.99], [0, 0, 0], 0.5) == pytest.approx(0.0204, abs=1e-3)


def triode_job(folder: Path, *, netlist_edit=None, job_edit=None) -> Path:
    """The triode demo with absolute paths, optionally edited."""
    folder.mkdir(parents=True, exist_ok=True)
    netlist = (DEMO / "two_stage_triode.cir").read_text()
    if netlist_edit:
        netlist = netlist_edit(netlist)
    (folder / "amp.cir").write_text(netlist)
    text = (DEMO / "job_triode.toml").read_text()
    text = text.replace('netlist = "two_stage_triode.cir"', 'netlist = "amp.cir"')
    text = text.replace('models = "models.lib"', f'models = "{DEMO / "models.lib"}"')
    if job_edit:
        text = job_edit(text)
    (folder / "job.toml").write_text(text)
    return folder / "job.toml"


@pytest.fixture(scope="module")
def triode_tuned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("triode")
    job_path = triode_job(folder / "job")
    return folder, tune(load_job(job_path), out=folder / "out", workers=2)


def test_demo_with_a_triode_device_converges_at_every_corner(triode_tuned):
    _, result = triode_tuned
    assert result.status == "converged", result.outcome.message
    data = result.as_json()
    device = data["device"]
    assert device["name"] == "Mz" and device["size"] == "w"
    assert [info["name"] for info in device["corners"]] == [c.corner.name for c in result.corners]
    for info in device["corners"]:
        # no DC current: VDS is only what junction leakage leaves (tens of µV here)
        assert info["resistance_ohm"] > 0 and abs(info["vds"]) < 1e-3
    assert device["start"]["from"] == "square law"
    assert 0.2e-6 <= result.outcome.values["rc"] <= 20e-6


def test_compensated_triode_netlist_measures_the_same(triode_tuned, tmp_path):
    """The chosen width written into the netlist copy; a fresh measurement agrees."""
    folder, result = triode_tuned
    data = json.loads((folder / "out" / "results.json").read_text())
    compensated = Path(data["compensated_netlist"]["path"]).read_text()
    assert f"w={result.outcome.values['rc']!r}" in compensated
    fresh_job = triode_job(tmp_path / "check", netlist_edit=lambda _: compensated)
    fresh = measure(load_job(fresh_job), out=tmp_path / "check" / "out", workers=2)
    assert fresh.ac_reused == 0
    reported = {c["name"]: c["phase_margin_deg"] for c in data["corners"]}
    for corner in fresh.corners:
        assert corner.margins.phase_margin_deg == pytest.approx(reported[corner.corner.name],
                                                                abs=0.05)


def test_step_check_reports_how_much_the_channel_resistance_moves(triode_tuned):
    _, result = triode_tuned
    shares = [c.resistance_share for c in result.step_checks.values()]
    assert shares and all(s is not None and 0 <= s < 0.1 for s in shares)


def run(argv, capsys):
    code = main(argv)
    return code, capsys.readouterr()


def test_device_that_is_not_a_mosfet(tmp_path, capsys):
    job = triode_job(tmp_path / "job", job_edit=lambda t: t.replace('device = "Mz"', 'device = "Cc"'))
    code, out = run(["tune", str(job), "--out", str(tmp_path / "out")], capsys)
    assert code == 2
    assert "Cc is not a MOSFET" in out.err and "amp.cir" in out.err


def test_size_key_the_device_does_not_take(tmp_path, capsys):
    job = triode_job(tmp_path / "job",
                     netlist_edit=lambda n: n.replace("Mz n1 vbz nz vss nch w=2u l=1u",
                                                      "Mz n1 vbz nz vss nch l=1u"))
    code, out = run(["tune", str(job), "--out", str(tmp_path / "out")], capsys)
    assert code == 2
    assert "Mz has no w= to tune" in out.err


def test_device_not_in_triode_names_the_corner_and_its_voltages(tmp_path, capsys):
    """The gate bias drops to 0.3 V at one corner: below threshold there."""
    def edit(text: str) -> str:
        text = text.replace('vbz = { volts = "{vdd}" }', 'vbz = { volts = "{vbz}" }')
        text = text.replace('params = { vdd = 1.8, cl = "2p" }',
                            'params = { vdd = 1.8, cl = "2p", vbz = 1.8 }')
        text = text.replace('params = { vdd = 1.71, cl = "3p" }\n',
                            'params = { vdd = 1.71, cl = "3p", vbz = 0.3 }\n', 1)
        return text.replace("[[corners]]", "[params]\nvbz = 1.8\n[[corners]]", 1)
    job = triode_job(tmp_path / "job", job_edit=edit)
    code, out = run(["tune", str(job), "--out", str(tmp_path / "out")], capsys)
    assert code == 2
    assert "Mz is not in triode at corner ss_125c_1v71_3p" in out.err
    assert "VDS =" in out.err and "VGS =" in out.err and "VT =" in out.err


def test_device_on_the_output_side_is_warned_about(tmp_path, capsys):
    """Mz moved to the other side of Cc, touching the output."""
    def edit(netlist: str) -> str:
        netlist = netlist.replace("Mz n1 vbz nz vss nch w=2u l=1u", "Mz nz vbz out vss nch w=2u l=1u")
        return netlist.replace("Cc nz out {cc}", "Cc n1 nz {cc}")
    job = triode_job(tmp_path / "job", netlist_edit=edit)
    _code, out = run(["measure", str(job), "--out", str(tmp_path / "out"), "--no-report"], capsys)
    assert "touches the amplifier output out" in out.err
    assert "modulated by the signal" in out.err
