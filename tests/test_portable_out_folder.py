"""The out folder as a user handles it: moved elsewhere, or left behind by Ctrl-C.

References: ngspice itself, run by hand (``ngspice -b``) on the decks amploop leaves, must
give the loop gain amploop recorded; a real SIGINT to a running ``amploop`` process.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from conftest import DEMO, recorded_analyses

from amploop.cli import main
from amploop.sim.bundles import include_targets


def nested_demo_job(folder: Path) -> Path:
    """The demo job (invented circuit and cards) with its files spread over sub-folders
    and included through one another: the netlist ``.include``s ``parts/extra.cir``
    (relative), the models file is ``lib/wrapper.lib`` whose sections read the demo's
    cards from ``cards/models.lib``, by an absolute path in section tt and a relative one
    in the others."""
    (folder / "parts").mkdir(parents=True)
    (folder / "lib").mkdir()
    (folder / "cards").mkdir()
    shutil.copy(DEMO / "models.lib", folder / "cards" / "models.lib")
    cards = folder / "cards" / "models.lib"
    (folder / "lib" / "wrapper.lib").write_text(
        f'* invented wrapper\n.lib tt\n.lib "{cards}" tt\n.endl tt\n'
        '.lib ss\n.lib "../cards/models.lib" ss\n.endl ss\n'
        '.lib ff\n.lib ../cards/models.lib ff\n.endl ff\n')
    (folder / "parts" / "extra.cir").write_text("* invented: a parameter the netlist reads\n"
                                                ".param rbleed=1e12\n")
    netlist = (DEMO / "two_stage.cir").read_text()
    netlist = '.include "parts/extra.cir"\n' + netlist.replace(
        ".ends two_stage", "Rbleed out vss {rbleed}\n.ends two_stage")
    (folder / "two_stage.cir").write_text(netlist)
    job = (DEMO / "job.toml").read_text().replace('models = "models.lib"',
                                                  'models = "lib/wrapper.lib"')
    (folder / "job.toml").write_text(job)
    return folder / "job.toml"


def test_decks_rerun_by_hand_after_the_out_folder_is_copied_elsewhere(tmp_path, capsys):
    """Copy the out folder away, delete the job's folder, run ngspice -b in the copy's
    decks/: every corner's deck runs and writes the loop gain amploop measured."""
    job = nested_demo_job(tmp_path / "job")
    out = tmp_path / "out"
    assert main(["measure", str(job), "--out", str(out), "--workers", "2", "--no-report",
                 "--quiet"]) == 0
    capsys.readouterr()
    moved = tmp_path / "elsewhere" / "copy"
    shutil.copytree(out, moved)
    shutil.rmtree(tmp_path / "job")
    shutil.rmtree(out)
    decks = moved / "decks"
    for deck in sorted(decks.glob("*.cir")):
        proc = subprocess.run(["ngspice", "-b", deck.name], cwd=decks, capture_output=True,
                              text=True, timeout=120, check=False)
        assert proc.returncode == 0, f"{deck.name}: {proc.stdout[-800:]} {proc.stderr[-800:]}"
        read = include_targets(deck.read_text())
        assert read and not [p for p in read if Path(p).is_absolute()], read
        by_hand = np.loadtxt(decks / f"{deck.stem}-loop_gain.txt")
        recorded = np.loadtxt(moved / "loop_gain" / f"{deck.stem}.csv", delimiter=",",
                              skiprows=1)
        np.testing.assert_allclose(by_hand[:, 0], recorded[:, 0], rtol=1e-8)  # wrdata: 9 digits
        np.testing.assert_allclose(by_hand[:, 1] + 1j * by_hand[:, 2],
                                   recorded[:, 3] + 1j * recorded[:, 4], rtol=1e-6)
    assert len(list(decks.glob("*.cir"))) == 10
    assert json.loads((moved / "results.json").read_text())["status"] == "ok"


GRID_90 = ('[corner_grid]\nlib = ["tt", "ss", "ff"]\ntemp = [-40, 0, 27, 85, 125]\n'
           'params = { vdd = [1.71, 1.8, 1.89], cl = ["1p", "3p"] }\n')
GRID_30 = ('[corner_grid]\nlib = ["tt", "ss", "ff"]\ntemp = [-40, 0, 27, 85, 125]\n'
           'params = { vdd = [1.71, 1.89], cl = ["2p"] }\n')


def _ctrl_c_after(command: list[str], journal: Path, records: int) -> subprocess.CompletedProcess:
    """Run ``command`` in its own process group; once ``journal`` holds ``records``
    analyses, send SIGINT to the whole group, as Ctrl-C in a terminal does."""
    process = subprocess.Popen(command, start_new_session=True, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 600  # a loaded machine
    while recorded_analyses(journal) < records and time.monotonic() < deadline \
            and process.poll() is None:
        time.sleep(0.02)
    assert process.poll() is None, "the run finished before it could be interrupted"
    assert recorded_analyses(journal) >= records, "the run never got that far"
    os.killpg(process.pid, signal.SIGINT)
    out, err = process.communicate(timeout=300)
    return subprocess.CompletedProcess(command, process.returncode, out, err)


def slow_demo_grid(folder: Path, grid: str) -> Path:
    """The demo job (invented) over the corners of ``grid``, at 400 points a decade (ten
    times the demo's, so that each analysis takes long enough for a signal to land inside
    a run)."""
    job = folder / "job.toml"
    folder.mkdir()
    text = (DEMO / "job.toml").read_text().replace("points_per_decade = 40",
                                                   "points_per_decade = 400")
    for name in ("two_stage.cir", "models.lib"):
        text = text.replace(f'"{name}"', f'"{DEMO / name}"')
    job.write_text(text[: text.index("[[corners]]")] + grid)
    return job


def test_ctrl_c_during_tune_leaves_results_json_with_what_was_finished(tmp_path):
    """Signalled after the characterisation at the ports and the verification (2 × 30
    analyses), among the report's map samples or the step checks after them."""
    job = slow_demo_grid(tmp_path / "job", GRID_30)
    out = tmp_path / "out"
    proc = _ctrl_c_after([sys.executable, "-m", "amploop.cli", "tune", str(job), "--out",
                          str(out), "--workers", "2", "--quiet"], out / "journal.sqlite", 95)
    assert proc.returncode == 130, proc.stderr
    assert "interrupted" in proc.stderr and "Traceback" not in proc.stderr
    results = json.loads((out / "results.json").read_text())
    assert results["status"] == "interrupted" and results["command"] == "tune"
    assert "--resume" in results["message"] and str(out) in results["message"]
    assert results["ac_analyses"]["run"] >= 2 * 90  # two AC analyses per recorded one
    # one characterisation at the ports per corner, then the verification
    assert [h["kind"] for h in results["history"]][:2] == ["characterise-ports", "verify"]
    assert recorded_analyses(out / "journal.sqlite") >= 95
    assert not list(out.glob(".results.json.tmp*"))
    assert not (out / "compensated").exists()


def test_ctrl_c_during_measure_leaves_results_json_marked_interrupted(tmp_path):
    """The signal lands among the loop-gain analyses or the step checks after them: either
    way "interrupted"."""
    job = slow_demo_grid(tmp_path / "job", GRID_90)
    out = tmp_path / "out"
    proc = _ctrl_c_after([sys.executable, "-m", "amploop.cli", "measure", str(job), "--out",
                          str(out), "--workers", "2", "--quiet"], out / "journal.sqlite", 30)
    assert proc.returncode == 130, proc.stderr
    results = json.loads((out / "results.json").read_text())
    assert results["status"] == "interrupted", results.get("message")
    assert "the same command again" in results["message"]
    assert all(c["status"] == "ok" for c in results["corners"])
    # the corners whose analyses were recorded, but for those in flight at the signal
    assert 30 - 2 <= len(results["corners"]) <= 90
