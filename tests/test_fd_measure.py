"""Fully-differential amplifiers: amploop's two loop gains against an exact reference.

The reference is tests/nodal_fd.py: the linear fully-differential macromodel with a CMFB
loop, its differential loop gain as Bode's return ratio of gm1 in the differential half
circuit and its common-mode loop gain as the return ratio of the CMFB error amplifier's
gcm (H. W. Bode, 1945), by its own nodal analysis, which uses nothing of amploop.
Tolerances: 0.05° of phase margin and 0.1 % of unity-gain frequency, as the issue asks.
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import numpy as np
import pytest
from nodal_fd import (
    CM_LIMITED,
    DEFAULT,
    FdMacromodel,
    common_mode_loop_gain,
    differential_loop_gain,
    margins,
)

from amploop.cli import main
from amploop.corners.measure import measure
from amploop.spec.job import load_job


def fd_job(tmp_path: Path, model: FdMacromodel, *, miller: str = "params", **amplifier) -> dict:
    """A job (dict) of ``model`` in its testbench, its netlist written into ``tmp_path``."""
    (tmp_path / "fd.cir").write_text(model.netlist(miller=miller))
    feedback = ({"kind": "resistive", "input": repr(model.z_in), "feedback": repr(model.z_fb)}
                if model.kind == "resistive" else
                {"kind": "capacitive", "input": repr(model.z_in), "feedback": repr(model.z_fb),
                 "dc_path": repr(model.r_dc)})
    compensation = ({"cc": {"param": "cc", "min": "0.1p", "max": "10p"},
                     "rc": {"param": "rc", "min": "0", "max": "20k"}} if miller == "params"
                    else {"cc": {"element": ["Cc1", "Cc2"], "min": "0.1p", "max": "10p"}})
    return {
        "name": "fd_macro",
        "amplifier": {"netlist": "fd.cir", "subckt": "fdmacro", "in_p": "inp", "in_n": "inn",
                      "out": "outp", "out_n": "outn", "common_mode_break": "Vcmb",
                      **amplifier},
        "bias": {"common_mode": "0", "vcm": {"volts": "0"}},
        "feedback": {**feedback, "load": repr(model.cl)},
        "compensation": compensation,
        "analysis": {"start": "1", "stop": "10G", "points_per_decade": 100},
    }


def _close(measured, reference) -> None:
    """Measured margins against the reference's (dc dB, ugf Hz, pm deg)."""
    dc_db, ugf, pm = reference
    assert measured.dc_loop_gain_db == pytest.approx(dc_db, abs=0.01)
    assert measured.unity_gain_hz == pytest.approx(ugf, rel=1e-3)
    assert measured.phase_margin_deg == pytest.approx(pm, abs=0.05)


@pytest.mark.parametrize("kind", ["resistive", "capacitive"])
@pytest.mark.parametrize("cc, rc", [(0.5e-12, 1500.0), (1e-12, 600.0), (3e-12, 100.0)])
def test_both_loops_agree_with_the_nodal_reference(tmp_path, kind, cc, rc):
    base = DEFAULT if kind == "resistive" else DEFAULT.with_(kind="capacitive", z_in=2e-12,
                                                             z_fb=1e-12)
    model = base.with_(cc=cc, rc=rc)
    job = load_job(fd_job(tmp_path, model), base=tmp_path)
    result = measure(job, overrides={"cc": cc, "rc": rc}, workers=1, time_domain=False)
    corner = result.corners[0]
    assert corner.status == "ok", corner.problem
    _close(corner.margins, margins(differential_loop_gain, model))
    assert corner.common_mode is not None
    _close(corner.common_mode, margins(common_mode_loop_gain, model))
    # the two loops are different loops: the check above could not pass with one for both
    assert abs(corner.margins.phase_margin_deg - corner.common_mode.phase_margin_deg) > 3


def test_results_json_and_files_of_a_fully_differential_corner(tmp_path):
    job = load_job(fd_job(tmp_path, CM_LIMITED), base=tmp_path)
    result = measure(job, out=tmp_path / "out", workers=1, time_domain=False)
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    corner = data["corners"][0]
    reference = margins(common_mode_loop_gain, CM_LIMITED)
    assert corner["common_mode"]["phase_margin_deg"] == pytest.approx(reference[2], abs=0.05)
    assert corner["common_mode"]["unity_gain_hz"] == pytest.approx(reference[1], rel=1e-3)
    assert set(corner["common_mode"]) == {"dc_loop_gain_db", "unity_gain_hz",
                                          "phase_margin_deg", "gain_margin_db",
                                          "phase_crossover_hz"}
    # the CSVs hold the two loop gains
    csv = np.loadtxt(tmp_path / "out" / "loop_gain" / "nominal-cm.csv", delimiter=",",
                     skiprows=1)
    expected = common_mode_loop_gain(CM_LIMITED, csv[:, 0])
    assert np.allclose(csv[:, 3] + 1j * csv[:, 4], expected, rtol=1e-6, atol=1e-9)
    assert result.corners[0].common_mode.phase_margin_deg == pytest.approx(reference[2],
                                                                           abs=0.05)


def test_the_hand_deck_reruns_both_loops(tmp_path):
    job = load_job(fd_job(tmp_path, DEFAULT), base=tmp_path)
    measure(job, out=tmp_path / "out", workers=1, time_domain=False)
    decks = tmp_path / "out" / "decks"
    (decks / ".spiceinit").write_text("set num_threads=1\n")
    subprocess.run(["ngspice", "-b", "nominal.cir"], cwd=decks, capture_output=True,
                   timeout=60, check=False)
    for suffix, reference in (("", differential_loop_gain), ("-cm", common_mode_loop_gain)):
        rows = np.loadtxt(decks / f"nominal-loop_gain{suffix}.txt")
        assert rows.shape[0] > 100
        expected = reference(DEFAULT, rows[:, 0])
        assert np.allclose(rows[:, 1] + 1j * rows[:, 2], expected, rtol=1e-5, atol=1e-9)


def test_an_element_pair_sets_both_halves(tmp_path):
    model = DEFAULT.with_(cc=2e-12)
    job = load_job(fd_job(tmp_path, DEFAULT, miller="elements"), base=tmp_path)
    result = measure(job, overrides={"cc": 2e-12}, workers=1, time_domain=False)
    corner = result.corners[0]
    _close(corner.margins, margins(differential_loop_gain, model))
    _close(corner.common_mode, margins(common_mode_loop_gain, model))


def test_a_single_ended_corner_has_no_common_mode_entry(tmp_path, macro_job):
    from nodal import Macromodel

    path = macro_job(Macromodel(), corners={"only": 1e-12})
    result = measure(load_job(path), workers=1, time_domain=False)
    assert "common_mode" not in result.as_json()["corners"][0]
    assert result.corners[0].common_mode is None


def test_a_break_written_the_wrong_way_round_is_named(tmp_path, capsys):
    data = fd_job(tmp_path, DEFAULT)
    netlist = tmp_path / "fd.cir"
    netlist.write_text(netlist.read_text().replace("Vcmb ncm ncm_b 0", "Vcmb ncm_b ncm 0"))
    job = load_job(data, base=tmp_path)
    corner = measure(job, workers=1, time_domain=False).corners[0]
    assert corner.status == "error"
    assert "wrong way round" in corner.error
    # about −6 dB at DC: what the swapped break gives (1/T' = −(2 + 1/T) for large T)
    assert corner.common_mode.dc_loop_gain_db == pytest.approx(-6.02, abs=0.1)


def _job_file(tmp_path: Path, data: dict) -> Path:
    """``data`` written as a TOML job file in ``tmp_path``."""
    lines = []

    def value(v):
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {value(x)}" for k, x in v.items()) + " }"
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return json.dumps(v)

    lines.append(f"name = {value(data['name'])}")
    for table in ("amplifier", "bias", "feedback", "compensation", "analysis", "target"):
        if table in data:
            lines.append(f"[{table}]")
            lines += [f"{k} = {value(v)}" for k, v in data[table].items()]
    path = tmp_path / "job.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def _bad(tmp_path, capsys, data: dict, netlist_edit: tuple[str, str] | None = None) -> str:
    path = _job_file(tmp_path, data)
    if netlist_edit is not None:
        netlist = tmp_path / "fd.cir"
        text = netlist.read_text()
        assert netlist_edit[0] in text
        netlist.write_text(text.replace(*netlist_edit))
    code = main(["measure", str(path), "--out", str(tmp_path / "out"), "--workers", "1",
                 "--no-report"])
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2, err
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


def test_out_n_equal_to_out_is_refused(tmp_path, capsys):
    data = fd_job(tmp_path, DEFAULT)
    data["amplifier"]["out_n"] = "outp"
    line = _bad(tmp_path, capsys, data)
    assert "job.toml:[amplifier].out_n" in line and "same port as out" in line


@pytest.mark.parametrize("name, edit, words", [
    ("Rs1", None, "not a voltage source"),
    ("Vnone", None, "not an element of subckt fdmacro"),
    ("Vcmb", ("Vcmb ncm ncm_b 0", "Vcmb ncm ncm_b dc 0.1"), "not a 0 V source"),
    ("Vcmb", ("Vcmb ncm ncm_b 0", "Vcmb ncm outp 0"), "sits on port outp"),
])
def test_a_break_that_is_no_inner_0v_source_is_refused(tmp_path, capsys, name, edit, words):
    data = fd_job(tmp_path, DEFAULT)
    data["amplifier"]["common_mode_break"] = name
    line = _bad(tmp_path, capsys, data, edit)
    assert "[amplifier].common_mode_break" in line and words in line


def test_an_element_pair_of_different_values_is_refused(tmp_path, capsys):
    data = fd_job(tmp_path, DEFAULT.with_(cc_mismatch=0.2), miller="elements")
    line = _bad(tmp_path, capsys, data)
    assert "Cc1 is 1.1 pF and Cc2 is 900 fF" in line and "fd.cir:" in line


def test_a_common_mode_target_without_a_break_is_refused(tmp_path, capsys):
    data = fd_job(tmp_path, DEFAULT)
    del data["amplifier"]["common_mode_break"]
    data["target"] = {"phase_margin": 60, "common_mode_phase_margin": 45}
    line = _bad(tmp_path, capsys, data)
    assert "[target].common_mode_phase_margin" in line and "needs the loop's break" in line


def test_both_outputs_are_checked_against_the_common_mode(tmp_path):
    """The CMFB holds the output common mode at vcm: with vcm 0.5 V away from the input
    common mode both outputs sit 0.5 V off it, more than 10 % of the 0.5 V span of the
    voltage sources, and the corner is suspect, naming both outputs."""
    data = fd_job(tmp_path, DEFAULT)
    data["bias"]["vcm"] = {"volts": "0.5"}
    corner = measure(load_job(data, base=tmp_path), workers=1, time_domain=False).corners[0]
    assert corner.status == "suspect", corner.problem
    op = corner.operating_point
    assert op.output_v == pytest.approx(0.5, abs=5e-3)  # the CM loop gain: ~460
    assert op.output_n_v == pytest.approx(0.5, abs=5e-3)
    assert "the first output sits at" in corner.suspect_reason
    assert "the second output sits at" in corner.suspect_reason


def test_a_second_run_reuses_both_loops_from_the_journal(tmp_path):
    job = load_job(fd_job(tmp_path, DEFAULT), base=tmp_path)
    first = measure(job, out=tmp_path / "out", workers=1, time_domain=False)
    again = measure(job, out=tmp_path / "out", workers=1, time_domain=False)
    assert first.ac_run > 0 and again.ac_run == 0 and again.ac_reused == first.ac_run
    assert again.corners[0].common_mode == first.corners[0].common_mode


def test_the_outputs_are_checked_against_the_common_mode_reference_when_named(tmp_path):
    """The same circuit with [amplifier].common_mode_reference = "vcm": the outputs sit at
    vcm, which is where they belong, and the corner is ok."""
    data = fd_job(tmp_path, DEFAULT)
    data["bias"]["vcm"] = {"volts": "0.5"}
    data["amplifier"]["common_mode_reference"] = "vcm"
    corner = measure(load_job(data, base=tmp_path), workers=1, time_domain=False).corners[0]
    assert corner.status == "ok", corner.problem
    assert corner.operating_point.common_mode_v == pytest.approx(0.5)


def test_a_common_mode_reference_without_a_voltage_source_is_refused(tmp_path, capsys):
    data = fd_job(tmp_path, DEFAULT)
    data["amplifier"]["common_mode_reference"] = "outn"
    line = _bad(tmp_path, capsys, data)
    assert "[amplifier].common_mode_reference" in line and "voltage source" in line
