"""Tuning the transistor-level demo amplifier, resuming after a kill, and the command line.

The reference for the demo is the simulator itself, independently: a fresh measurement of
the compensated netlist amploop writes (a new out folder, nothing reused) must give the
margins the tuning reported.
"""

from __future__ import annotations

import json
import math
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import DEMO, recorded_analyses

from amploop.cli import main
from amploop.corners.measure import measure
from amploop.spec.job import load_job
from amploop.strategy.tune import tune


def job_copy(folder: Path, *, netlist: Path | None = None, grid: str | None = None) -> Path:
    """The demo job with absolute paths, optionally another netlist or a corner grid."""
    text = (DEMO / "job.toml").read_text()
    netlist = netlist or DEMO / "two_stage.cir"
    text = text.replace('netlist = "two_stage.cir"', f'netlist = "{netlist}"')
    text = text.replace('models = "models.lib"', f'models = "{DEMO / "models.lib"}"')
    if grid is not None:
        text = text[: text.index("[[corners]]")] + grid
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "job.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def demo_tuned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    result = tune(load_job(DEMO / "job.toml"), out=folder / "out", workers=2)
    return folder, result


def test_demo_tunes_to_the_target_at_every_corner(demo_tuned):
    _, result = demo_tuned
    job = load_job(DEMO / "job.toml")
    assert result.status == "converged", result.outcome.message
    worst = result.outcome.final.worst
    assert job.target.phase_margin_deg <= worst.phase_margin_deg
    assert worst.phase_margin_deg <= job.target.phase_margin_deg + job.target.tolerance_deg
    assert worst.gain_margin_db >= job.target.gain_margin_db
    assert len(result.corners) == len(job.corners)
    assert result.ac_run + result.ac_reused <= 10 * len(job.corners)


def test_fresh_measurement_of_the_compensated_netlist_agrees(demo_tuned, tmp_path):
    folder, _result = demo_tuned
    data = json.loads((folder / "out" / "results.json").read_text())
    compensated = Path(data["compensated_netlist"]["path"])
    assert compensated.is_file()
    assert "+.subckt two_stage" in data["compensated_netlist"]["diff"]
    fresh = measure(load_job(job_copy(tmp_path / "check", netlist=compensated)),
                    out=tmp_path / "check" / "out", workers=2)
    assert fresh.ac_reused == 0
    reported = {c["name"]: c["phase_margin_deg"] for c in data["corners"]}
    for corner in fresh.corners:
        assert corner.margins.phase_margin_deg == pytest.approx(reported[corner.corner.name],
                                                                abs=0.05)
    assert fresh.values == pytest.approx(data["values"])


def test_a_lead_zero_below_the_unity_gain_frequency_is_flagged_and_settles_slowly(demo_tuned):
    """At 292.8 fF and 20 kΩ the lead zero 1/(2π·Cc·(Rc − 1/gm2)) sits below the unity-gain
    frequency of the fast corners: the warning names the corner, and there the simulated
    step settles (to 0.1 %) far slower than a one-pole loop of that bandwidth,
    ln(1000)/(2π·f_u) (common practice), and close to ln(1000) times the doublet's time
    constant the warning gives (the tail's amplitude is below 1, so a little less)."""
    _, result = demo_tuned
    warning = next((w for w in result.warnings if "lead zero" in w), None)
    assert warning is not None, result.warnings
    corner_name = re.search(r"at corner (\S+)", warning).group(1)
    corner = next(c for c in result.corners if c.corner.name == corner_name)
    zero_hz = float(re.search(r"= ([\d.]+) MHz sits below", warning).group(1)) * 1e6
    assert zero_hz < corner.margins.unity_gain_hz
    settling = result.step_checks[corner_name].metrics.settling_s
    one_pole = math.log(1000) / (2 * math.pi * corner.margins.unity_gain_hz)
    doublet = math.log(1000) / (2 * math.pi * zero_hz)
    assert settling > 2.5 * one_pole
    assert 0.7 * doublet < settling < 1.05 * doublet


def test_rerun_reuses_every_analysis_and_lands_on_the_same_values(demo_tuned):
    folder, first = demo_tuned
    again = tune(load_job(DEMO / "job.toml"), out=folder / "out", workers=2, resume=True)
    assert again.ac_run == 0
    assert again.ac_reused == first.ac_run + first.ac_reused
    assert again.outcome.values == first.outcome.values


GRID = ('[corner_grid]\nlib = ["tt", "ss", "ff"]\ntemp = [-40, 0, 27, 85, 125]\n'
        'params = { vdd = [1.71, 1.8, 1.89], cl = ["1p", "3p"] }\n')  # 90 corners


def test_kill_9_then_resume_gives_the_values_of_an_uninterrupted_run(tmp_path):
    job_path = job_copy(tmp_path / "job", grid=GRID)
    killed = tmp_path / "killed"
    command = [sys.executable, "-m", "amploop.cli", "tune", str(job_path), "--out", str(killed),
               "--workers", "2", "--quiet"]
    process = subprocess.Popen(command, start_new_session=True)
    journal = killed / "journal.sqlite"
    deadline = time.monotonic() + 120
    while recorded_analyses(journal) < 60 and time.monotonic() < deadline and process.poll() is None:
        time.sleep(0.02)
    assert process.poll() is None, "the run finished before it could be killed"
    os.killpg(process.pid, signal.SIGKILL)  # the coordinator and its workers, at once
    process.wait()
    recorded = recorded_analyses(journal)
    assert recorded >= 60

    resumed = tune(load_job(job_path), out=killed, workers=2, resume=True)
    assert resumed.ac_reused >= 2 * recorded  # two AC analyses per recorded analysis
    straight = tune(load_job(job_path), out=tmp_path / "straight", workers=2)
    assert resumed.status == straight.status == "converged"
    assert resumed.outcome.values == straight.outcome.values
    assert resumed.ac_run + resumed.ac_reused == straight.ac_run


def test_tune_command_prints_the_result_and_exits_0(tmp_path, capsys):
    code = main(["tune", str(DEMO / "job.toml"), "--out", str(tmp_path / "out"), "--json"])
    out = capsys.readouterr().out
    assert code == 0
    summary = json.loads(out.strip().splitlines()[-1])
    assert summary["status"] == "converged" and summary["strategy"] == "map"
    assert summary["worst"]["phase_margin_corner"] in summary["message"]


def test_infeasible_exits_3_and_says_why(tmp_path, capsys):
    path = job_copy(tmp_path / "job")
    text = path.read_text().replace('max = "10p"', 'max = "0.3p"').replace('max = "20k"', 'max = "0"')
    path.write_text(text)
    code = main(["tune", str(path), "--out", str(tmp_path / "out")])
    captured = capsys.readouterr()
    assert code == 3
    line = [l for l in captured.err.splitlines() if l.startswith("amploop: infeasible")]
    assert len(line) == 1
    assert re.search(r"best reachable worst-corner phase margin is -?\d+\.\d\d°", line[0])
    assert "corner " in line[0] and "Cc = 300 fF" in line[0]


def test_resume_without_a_journal_is_refused(tmp_path, capsys):
    code = main(["tune", str(DEMO / "job.toml"), "--out", str(tmp_path / "new"), "--resume"])
    assert code == 2
    assert "nothing to resume" in capsys.readouterr().err


def test_textbook_strategy_converges_on_the_demo(tmp_path):
    result = tune(load_job(DEMO / "job.toml"), out=tmp_path / "out", strategy="textbook",
                  workers=2)
    assert result.status == "converged", result.outcome.message
    kinds = [h.kind for h in result.history]
    assert kinds[:3] == ["start", "dominant-pole", "lead"]
