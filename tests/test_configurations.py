"""Several feedback configurations per job, checked against the exact nodal model.

The reference is tests/nodal.py: the linear two-stage macromodel's loop gain as Bode's
return ratio of gm1 (H. W. Bode, 1945) by its own nodal analysis, here in two
configurations of an invented switched-capacitor stage: the gain-of-2 "amplify" phase
(2 pF in, 1 pF feedback, 1 GΩ across it, the corner's load) and the "sample" phase (unity
feedback, 2 pF of sampling capacitors on the inverting input, 0.5 pF on the output).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from nodal import Macromodel, dense_margins, exact_loop_gain, zoomed_grid_optimum

from amploop.cli import main
from amploop.corners.measure import measure
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

BASE = Macromodel(cc=1e-12, rc=500.0)
LOADS = {"light": 1e-12, "heavy": 3e-12}
CONFIGURATIONS = {
    "amplify": dict(kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9),
    "sample": dict(kind="unity", c_in=2e-12, cl=0.5e-12),
}
TARGET_PM, TOLERANCE = 60.0, 1.0
CC_BOUNDS, RC_BOUNDS = (0.2e-12, 10e-12), (0.0, 20e3)
_F = np.logspace(0, 10, 801)


def exact_model(point: str) -> Macromodel:
    """The exact model of point ``<corner>@<configuration>``."""
    corner, configuration = point.split("@")
    return BASE.with_(**{"cl": LOADS[corner], **CONFIGURATIONS[configuration]})


def job_dict(tmp_path) -> dict:
    (tmp_path / "macro.cir").write_text(BASE.netlist())
    return {
        "name": "two_phases",
        "amplifier": {"netlist": "macro.cir", "subckt": "macro", "in_p": "inp", "in_n": "inn",
                      "out": "out"},
        "bias": {"common_mode": "0.9"},
        "feedback": [
            {"name": "amplify", "kind": "capacitive", "input": "2p", "feedback": "1p",
             "dc_path": "1G", "load": "{cl}"},
            {"name": "sample", "kind": "unity", "input_load": "2p", "load": "0.5p"},
        ],
        "compensation": {"cc": {"param": "cc", "min": "0.2p", "max": "10p"},
                         "rc": {"param": "rc", "min": "0", "max": "20k"}},
        "analysis": {"start": "1", "stop": "10G", "points_per_decade": 80},
        "target": {"phase_margin": TARGET_PM, "tolerance": TOLERANCE},
        "corners": [{"name": n, "params": {"cl": cl}} for n, cl in LOADS.items()],
    }


def test_every_corner_runs_in_every_configuration_at_its_exact_margins(tmp_path):
    job = load_job(job_dict(tmp_path), base=tmp_path)
    result = measure(job, out=tmp_path / "out", workers=1, time_domain=False)
    names = [c.corner.name for c in result.corners]
    assert names == ["light@amplify", "heavy@amplify", "light@sample", "heavy@sample"]
    for corner in result.corners:
        pm, ugf, _ = dense_margins(_F, exact_loop_gain(exact_model(corner.corner.name),
                                                       _F)[None, :])
        assert corner.margins.phase_margin_deg == pytest.approx(pm[0], abs=0.05)
        assert corner.margins.unity_gain_hz == pytest.approx(ugf[0], rel=1e-3)
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert [c["configuration"] for c in data["corners"]] == ["amplify"] * 2 + ["sample"] * 2
    assert (tmp_path / "out" / "loop_gain" / "heavy_sample.csv").is_file()


def _exact_worst(cc: float, rc: float) -> tuple[float, float]:
    """(worst PM, worst UGF) over every point on the exact model at (``cc``, ``rc``)."""
    figures = [dense_margins(_F, exact_loop_gain(exact_model(f"{c}@{k}").with_(cc=cc, rc=rc),
                                                 _F)[None, :])
               for c in LOADS for k in CONFIGURATIONS]
    return min(float(f[0][0]) for f in figures), min(float(f[1][0]) for f in figures)


def exhaustive_optimum() -> tuple[float, float, float]:
    """Max worst UGF with every point's PM ≥ the target, on grids that zoom in twice."""
    def score(cc: float, rc: float) -> float:
        pm, ugf = _exact_worst(cc, rc)
        return ugf if pm >= TARGET_PM else -np.inf

    return zoomed_grid_optimum(score, CC_BOUNDS, RC_BOUNDS[1])


@pytest.fixture(scope="module")
def tuned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("configurations")
    return tune(load_job(job_dict(folder), base=folder), out=folder / "out", workers=2,
                time_domain=False)


def test_tune_meets_the_target_in_both_configurations_on_the_exact_model(tuned):
    assert tuned.status == "converged", tuned.outcome.message
    values = tuned.outcome.values
    worst = tuned.outcome.final.worst
    assert worst.phase_margin_corner.endswith("@sample")  # the sample phase limits
    for corner in tuned.corners:
        model = exact_model(corner.corner.name).with_(cc=values["cc"], rc=values["rc"])
        pm, _, _ = dense_margins(_F, exact_loop_gain(model, _F)[None, :])
        assert pm[0] >= TARGET_PM - 0.05
        assert corner.margins.phase_margin_deg == pytest.approx(pm[0], abs=0.05)


def test_tune_finds_the_bandwidth_of_an_exhaustive_search(tuned):
    best_ugf, best_cc, best_rc = exhaustive_optimum()
    ours = tuned.outcome.final.worst.unity_gain_hz
    assert ours == pytest.approx(best_ugf, rel=0.01), (ours, best_ugf, best_cc, best_rc)


def test_a_single_feedback_table_keeps_its_corner_names_and_results(tmp_path):
    data = job_dict(tmp_path)
    data["feedback"] = data["feedback"][0] | {}
    del data["feedback"]["name"]
    result = measure(load_job(data, base=tmp_path), workers=1, time_domain=False)
    assert [c.corner.name for c in result.corners] == list(LOADS)
    assert "configuration" not in result.as_json()["corners"][0]


def _refused(tmp_path, capsys, data: dict) -> str:
    from test_fd_measure import _job_file

    data.setdefault("name", "bad")
    path = _job_file(tmp_path, {k: v for k, v in data.items() if k not in ("feedback",
                                                                            "corners")})
    text = path.read_text()
    for entry in data["feedback"]:
        text += "[[feedback]]\n" + "".join(f"{k} = {json.dumps(v)}\n" for k, v in entry.items())
    path.write_text(text)
    code = main(["measure", str(path), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2 and len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


@pytest.mark.parametrize("names, words", [
    (("phase 1", "phase_1"), "are the same name in file names"),
    (("a@b", "c"), "holds '@'"),
])
def test_configuration_names_that_collide_are_refused(tmp_path, capsys, names, words):
    data = job_dict(tmp_path)
    for entry, name in zip(data["feedback"], names):
        entry["name"] = name
    line = _refused(tmp_path, capsys, data)
    assert "[[feedback]]" in line and words in line


def test_a_unity_configuration_with_an_input_element_is_refused(tmp_path, capsys):
    data = job_dict(tmp_path)
    data["feedback"][1]["input"] = "2p"
    line = _refused(tmp_path, capsys, data)
    assert '[[feedback]] "sample".input' in line and "no input or feedback element" in line
